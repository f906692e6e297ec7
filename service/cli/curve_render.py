"""Readable terminal output of a learning curve: estimated error against training-set size."""

from __future__ import annotations

from typing import Any

from rich.console import Console
from rich.table import Table


def print_curve(console: Console, result: dict[str, Any], job_id: str) -> None:
    """One row per size: rows fitted on, the estimate, the error and its spread."""
    console.print(
        f"[bold]Learning curve[/bold] of dataset {result['dataset_hash'][:12]}"
        f" ({result['n_rows']} rows, {result['task']}), job {job_id}"
    )
    table = Table(
        title=f"Nested estimate by training-set size (error = {result['error_formula']}, "
        "same outer test folds at every size)"
    )
    for column in ("size", "train rows", result["pick_by"], "error", "std", "se", "job"):
        table.add_column(column, justify="left" if column == "job" else "right")
    for point in result["points"]:
        error = point["error"]
        table.add_row(
            f"{point['size']:.0%}",
            f"{point['n_train_mean']:.1f}",
            f"{point['estimate']['mean']:.4f}",
            f"{error['mean']:.4f}",
            f"{error['std']:.4f}",
            f"{error['se']:.4f}",
            point["job_id"],
        )
    console.print(table)
    console.print(
        "An error that still falls at the largest size suggests more rows would help; a flat "
        "tail suggests they would not (for data like this data)."
    )
