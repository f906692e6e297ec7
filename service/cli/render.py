"""Readable terminal output of result v1 and of a dataset description."""

from __future__ import annotations

import json
from typing import Any

from rich.console import Console
from rich.table import Table

from service.jobs.handover.search_summary import halving_summary


def _params(params: dict[str, Any]) -> str:
    return ", ".join(f"{k}={json.dumps(v)}" for k, v in params.items())


def _interval_line(metric: str, row: dict[str, Any]) -> str:
    """One line naming the interval, its level and its method, or why there is none."""
    found = row.get("interval")
    if "interval" not in row:  # results stored before intervals existed
        return f"  {metric}: no interval in this result (computed before intervals existed)."
    if found is None:
        return f"  {metric}: no interval (see the cautions below)."
    return (
        f"  {metric}: {found['level']:.0%} interval [{found['lower']:.4f}, {found['upper']:.4f}]"
        f", method {found['method']}: {found['source']}."
    )


def print_result(console: Console, result: dict[str, Any], job_id: str) -> None:
    """The estimate, each outer fold's pick, the final pick, the optimism gap and cautions."""
    pick_by = result["pick_by"]
    console.print(
        f"[bold]Nested cross-validation[/bold] of dataset {result['dataset_hash'][:12]}"
        f" ({result['n_rows']} rows, {result['task']}), job {job_id}"
    )
    estimate = Table(title="Estimate over outer folds (for data like this data)")
    for column in ("metric", "mean", "std", "se", "per fold"):
        estimate.add_column(column, justify="left" if column in ("metric", "per fold") else "right")
    for metric, row in result["estimate"].items():
        folds = " ".join(f"{v:.4f}" for v in row["values"])
        estimate.add_row(
            metric, f"{row['mean']:.4f}", f"{row['std']:.4f}", f"{row['se']:.4f}", folds
        )
    console.print(estimate)
    # the interval, not std or se, is the uncertainty of the estimate; one unwrapped line each
    for metric, row in result["estimate"].items():
        console.print(_interval_line(metric, row), soft_wrap=True, highlight=False, markup=False)
    outer = Table(title=f"Pick of each outer fold (by inner mean {pick_by})")
    for column in (
        "repeat",
        "fold",
        "train",
        "test",
        "pick",
        f"inner {pick_by}",
        f"outer {pick_by}",
    ):
        outer.add_column(column)
    for row in result["outer"]:
        pick = row["pick"]
        outer.add_row(
            str(row["repeat"]),
            str(row["fold"]),
            str(row["n_train"]),
            str(row["n_test"]),
            f"{pick['estimator']}({_params(pick['params'])})",
            f"{row['inner_mean']:.4f}",
            f"{row['scores'][pick_by]:.4f}",
        )
    console.print(outer)
    final = result["final_pick"]
    console.print(
        f"[bold]Final pick[/bold] (inner procedure on all rows, refit on all rows): "
        f"{final['estimator']}({_params(final['params'])})"
    )
    console.print(f"  model sha256 {final['model_sha256']}")
    gap = result["optimism_gap"]
    console.print(
        f"[bold]Optimism gap[/bold] {gap:+.4f} {pick_by}: a non-nested search would have "
        f"reported {final['inner_mean']:.4f}; the nested estimate is "
        f"{result['estimate'][pick_by]['mean']:.4f}."
    )
    work = result["work"]
    console.print(
        f"Work: {work['units_computed']} of {work['units_total']} units, "
        f"{work['fits']} fits, {work['seconds']:.1f} s."
    )
    halving = halving_summary(result)
    if halving is not None:
        console.print(f"Halving search: {halving}.", soft_wrap=True, highlight=False, markup=False)
    console.print("[bold]Cautions[/bold]")
    for caution in result["cautions"]:
        console.print(f"  - {caution}")


def print_description(console: Console, description: dict[str, Any]) -> None:
    """A dataset's hash, shape and columns."""
    console.print(f"content hash {description['content_hash']}")
    console.print(f"{description['n_rows']} rows, {description['n_columns']} columns")
    table = Table()
    for column in ("column", "kind", "missing", "distinct", "to read it otherwise"):
        table.add_column(column)
    for col in description["columns"]:
        hint = col.get("hint") or ""
        table.add_row(col["name"], col["kind"], str(col["missing"]), str(col["distinct"]), hint)
    console.print(table)
    if description.get("column_types"):
        console.print(description["column_types"], markup=False)
