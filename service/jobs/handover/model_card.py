"""The model card of a job's final pick, as JSON and as Markdown.

Sections follow Mitchell et al. 2019, "Model Cards for Model Reporting" (FAT* '19): model
details, intended use, factors, metrics, evaluation and training data, quantitative analyses,
ethical considerations, caveats and recommendations. Every figure comes from result v1 and the
stored dataset; nothing is recomputed here.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.config import Settings
from service.jobs.handover.model_file import MEDIA_TYPE, SUFFIX, untrusted_types_of
from service.jobs.handover.outer_predictions import require_result
from service.jobs.handover.stored_model import model_path
from service.store.host_cache import CopyRefused
from service.store.models import Dataset, FinalModel, Job


def _inputs(job: Job, dataset: Dataset, result: dict[str, Any]) -> list[dict[str, str]]:
    request = job.request or {}
    reserved = {request.get("target")}
    for side in ("outer", "inner"):
        split = request.get(side) or {}
        reserved |= {split.get("groups"), split.get("order_by")}
    kinds = {c["name"]: c["kind"] for c in dataset.columns}
    names = request.get("features") or [
        c["name"] for c in dataset.columns if c["name"] not in reserved
    ]
    return [{"name": n, "kind": kinds.get(n, "unknown")} for n in names]


def _untrusted(session: Session, model: FinalModel, settings: Settings) -> list[str] | None:
    """What skops would ask the loader to trust; None for a model kept in an older form or
    that this host cannot have intact (the model route says why)."""
    if Path(model.path).suffix != SUFFIX:
        return None
    try:
        return untrusted_types_of(model_path(session, model, settings))
    except CopyRefused:
        return None


def model_card(session: Session, job: Job, settings: Settings) -> dict[str, Any]:
    """The card as a JSON document (NotReady unless the job succeeded)."""
    result = require_result(job, "model card")
    dataset = session.scalars(select(Dataset).where(Dataset.content_hash == job.dataset_hash)).one()
    model = session.get_one(FinalModel, job.id)
    final = result["final_pick"]
    pick_by = result["pick_by"]
    return {
        "model_details": {
            "job_id": job.id,
            "estimator": final["estimator"],
            "params": final["params"],
            "candidate_key": final["candidate_key"],
            "preprocess": (job.request or {}).get("preprocess", "auto"),
            "format": MEDIA_TYPE,
            "model_sha256": final["model_sha256"],
            "size_bytes": model.size_bytes,
            "untrusted_types": _untrusted(session, model, settings),
            "fitted_at": job.finished_at.isoformat() if job.finished_at else None,
            "versions": result["versions"],
        },
        "intended_use": (
            f"A {result['task']} model for the target {job.request.get('target')!r} of this "
            "table, picked by nested cross-validation. Its estimate holds for rows drawn like "
            "these rows; check it again on data from elsewhere or from later."
        ),
        "inputs": _inputs(job, dataset, result),
        "factors": [
            {"column": s["column"], "groups": len(s["groups"])} for s in result.get("slices", [])
        ],
        "metrics": {"pick_by": pick_by, "estimate": result["estimate"]},
        "evaluation_data": {
            "dataset_hash": dataset.content_hash,
            "n_rows": dataset.n_rows,
            "n_columns": dataset.n_columns,
            "target": job.request.get("target"),
            "task": result["task"],
            "outer": job.request.get("outer"),
            "inner": job.request.get("inner"),
        },
        "training_data": "every row of the same table (the final refit after the selection)",
        "quantitative_analyses": {
            "outer_folds": [
                {"repeat": r["repeat"], "fold": r["fold"], "scores": r["scores"]}
                for r in result["outer"]
            ],
            "inner_mean_of_final_pick": final["inner_mean"],
            "optimism_gap": result["optimism_gap"],
            "pick_frequency": result["pick_frequency"],
            "slices": result.get("slices", []),
        },
        "ethical_considerations": result["cautions"],
        "caveats_and_recommendations": [
            "The nested estimate, not the final pick's inner mean, is the figure to expect; the "
            f"optimism gap ({result['optimism_gap']:+.4f} in {pick_by}) is how much a search on "
            "all rows would have flattered it.",
            "Load the file with skops.io.load after checking skops.io.get_untrusted_types; feed "
            "it a table with the input columns above (categorical columns as text).",
        ],
    }


def _fmt(value: Any) -> str:
    return f"{value:.4f}" if isinstance(value, float) else str(value)


def _interval(found: dict[str, Any] | None) -> str:
    """'0.9123 to 0.9567 (90%)', or why there is none."""
    if not found:
        return "none"
    return f"{found['lower']:.4f} to {found['upper']:.4f} ({found['level'] * 100:g}%)"


def _metric_lines(estimate: dict[str, Any]) -> list[str]:
    """The Metrics table, one row a metric with its interval, and which interval it is."""
    lines = ["| metric | mean | interval | std | SE |", "| --- | --- | --- | --- | --- |"]
    for metric, row in estimate.items():
        lines.append(
            f"| {metric} | {_fmt(row['mean'])} | {_interval(row.get('interval'))} | "
            f"{_fmt(row['std'])} | {_fmt(row['se'])} |"
        )
    source = next((r["interval"]["source"] for r in estimate.values() if r.get("interval")), None)
    lines += [
        "",
        "Quote the interval; std and SE are descriptive. "
        + (
            f"Interval: {source}."
            if source
            else "No metric has an interval (see the ethical considerations for why)."
        ),
    ]
    return lines


def card_markdown(card: dict[str, Any]) -> str:
    """The card as Markdown, in the same sections and order."""
    details = card["model_details"]
    params = ", ".join(f"{k}={v!r}" for k, v in details["params"].items()) or "defaults"
    lines = [
        f"# Model card: {details['estimator']} (job {details['job_id']})",
        "",
        "## Model details",
        f"- Estimator: {details['estimator']}({params}), preprocessing `{details['preprocess']}`",
        f"- Candidate key: `{details['candidate_key']}`",
        f"- File: {details['format']}, {details['size_bytes']} bytes, "
        f"sha256 `{details['model_sha256']}`",
        "- Types skops asks to trust: " + (", ".join(details["untrusted_types"] or []) or "none"),
        f"- Fitted: {details['fitted_at']}",
        "- Versions: " + ", ".join(f"{k} {v}" for k, v in details["versions"].items()),
        "",
        "## Intended use",
        card["intended_use"],
        "",
        "## Inputs",
        *[f"- `{c['name']}` ({c['kind']})" for c in card["inputs"]],
        "",
        "## Metrics (nested cross-validation estimate)",
        *_metric_lines(card["metrics"]["estimate"]),
    ]
    data = card["evaluation_data"]
    analyses = card["quantitative_analyses"]
    lines += [
        "",
        "## Evaluation and training data",
        f"- Table `{data['dataset_hash']}`: {data['n_rows']} rows, {data['n_columns']} columns",
        f"- Target `{data['target']}`, task {data['task']}",
        f"- Training: {card['training_data']}",
        "",
        "## Quantitative analyses",
        f"- Final pick's inner mean: {_fmt(analyses['inner_mean_of_final_pick'])}; optimism gap "
        f"{analyses['optimism_gap']:+.4f}",
        "- Pick frequency: "
        + ", ".join(
            f"{p['estimator']} {p['params']} x{p['count']}" for p in analyses["pick_frequency"]
        ),
    ]
    for piece in analyses["slices"]:
        lines += ["", f"### By `{piece['column']}` ({piece['rule']})"]
        lines += ["| value | rows | estimate | flagged |", "| --- | --- | --- | --- |"]
        pick_by = card["metrics"]["pick_by"]
        for group in piece["groups"]:
            mean = group["estimate"].get(pick_by, {}).get("mean")
            lines.append(
                f"| {group['value']} | {group['n_rows']} | {_fmt(mean)} | "
                f"{'yes' if group['flagged'] else 'no'} |"
            )
    lines += ["", "## Ethical considerations", *[f"- {c}" for c in card["ethical_considerations"]]]
    lines += ["", "## Caveats and recommendations"]
    lines += [f"- {c}" for c in card["caveats_and_recommendations"]]
    return "\n".join(lines) + "\n"
