"""The numbers each report page shows, gathered from the store and drawn as SVG."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.analysis.history import dataset_history
from service.auth import Principal
from service.cv.cautions import PEOPLE
from service.store.models import Dataset, Job
from service.web import curves, svg
from service.web.queries import (
    inner_cells,
    job_candidates,
    stored_score_counts,
)


def fmt(value: float | None) -> str:
    """A score as the pages print it."""
    return "n/a" if value is None else f"{value:.4f}"


def signed(value: float) -> str:
    """A difference with its sign."""
    return f"{value:+.4f}"


def describe(candidate: dict[str, Any]) -> str:
    """'SVC(C=1, gamma=0.1)' from a result's candidate entry."""
    params = ", ".join(f"{k}={curves.value_label(v)}" for k, v in candidate["params"].items())
    return f"{candidate['estimator']}({params})"


def learning_page(job: Job) -> dict[str, Any]:
    """Context of a learning-curve job: estimated error against training size, with its spread."""
    result = job.result if job.status == "succeeded" else None
    context: dict[str, Any] = {"title": f"learning curve {job.id[:12]}", "job": job}
    context["result"] = result
    if result:
        points = sorted(result["points"], key=lambda p: p["size"])
        labels = [f"{p['size']:.0%}" for p in points]
        context["points"] = points
        context["chart"] = svg.band_chart(
            labels,
            [p["error"]["mean"] for p in points],
            [p["error"]["std"] for p in points],
            label=f"Estimated error ({result['error_formula']}) against training size",
            y_title=result["error_formula"],
        )
    return context


def job_page(session: Session, job: Job) -> dict[str, Any]:
    """Context of the job page: result v1 drawn, plus inner-score curves from SQL aggregates."""
    result = job.result if job.status == "succeeded" else None
    request = job.request or {}
    metric = (result or {}).get("pick_by") or request.get("pick_by") or "accuracy"
    candidates = job_candidates(session, job.id)
    cells = inner_cells(session, job, metric)
    counts = stored_score_counts(session, job)
    context: dict[str, Any] = {
        "title": f"job {job.id[:12]}",
        "job": job,
        "result": result,
        "metric": metric,
        "candidates": candidates,
        "counts": {
            "inner": counts.get("inner", 0) + counts.get("final_inner", 0),
            "outer": counts.get("outer", 0),
        },
        "people": None,
    }
    if result:
        pick = result["estimate"][metric]
        context["pick"] = pick
        context["strip"] = svg.estimate_strip(
            pick["values"],
            pick["mean"],
            pick["std"],
            inner_best=result["final_pick"]["inner_mean"],
            label=f"Outer fold {metric} of the picked candidates, mean {fmt(pick['mean'])}",
        )
        picked = {row["candidate_key"]: row["count"] for row in result["pick_frequency"]}
        items = [(describe(c.__dict__), picked.get(c.key, 0)) for c in candidates]
        context["bars"] = svg.count_bars(
            items, label=f"Times each of {len(items)} candidates was picked by an outer fold"
        )
        context["people"] = PEOPLE if PEOPLE in result.get("cautions", []) else None
    drawn = []
    heats = []
    for family in curves.families(candidates):
        for key in family.varying:
            curve = curves.validation_curve(family, key, cells)
            drawn.append(
                {
                    "estimator": family.estimator,
                    "key": key,
                    "svg": svg.line_chart(
                        curve.series,
                        curve.x_labels,
                        label=f"Mean inner {metric} of {family.estimator} per value of {key}",
                        kind="inner-mean",
                        y_title=f"inner {metric}",
                    ),
                }
            )
        grid = curves.heat(family, cells)
        if grid is not None:
            heats.append(
                {
                    "estimator": grid.estimator,
                    "row_key": grid.row_key,
                    "col_key": grid.col_key,
                    "scope": grid.scope,
                    "svg": svg.heat_map(
                        grid.rows,
                        grid.cols,
                        grid.cells,
                        label=f"Mean inner {metric} of {grid.estimator} over {grid.row_key} "
                        f"and {grid.col_key}",
                        row_title=grid.row_key,
                        col_title=grid.col_key,
                    ),
                }
            )
    context["curves"], context["heats"] = drawn, heats
    return context


def dataset_page(session: Session, content_hash: str, principal: Principal) -> dict[str, Any]:
    """Context of the dataset page: the jobs on it, its refreshes and the estimate over time."""
    # dataset_history applies the API's visibility rules (NotFound, team filter on refreshes)
    story = dataset_history(session, principal, content_hash)
    dataset = session.scalars(select(Dataset).where(Dataset.content_hash == content_hash)).one()
    rows = [
        {
            "id": point.job_id,
            "status": point.status,
            "created": point.created_at.strftime("%Y-%m-%d %H:%M"),
            "metric": point.pick_by or "",
            "estimate": fmt(point.mean),
            "pick": describe(point.final_pick) if point.final_pick else "none",
        }
        for point in reversed(story.jobs)  # newest first, as the API lists jobs
    ]
    history = [
        (p.created_at, p.pick_by, p.mean, p.job_id)
        for p in story.jobs
        if p.mean is not None and p.pick_by is not None
    ]
    return {
        "title": f"dataset {content_hash[:12]}",
        "content_hash": content_hash,
        "dataset": dataset,
        "jobs": rows,
        "history": _history_chart(history) if history else None,
        "refreshes": story.refreshes,
    }


def _history_chart(history: list[tuple[datetime, str, float, str]]) -> Any:
    labels: list[str] = []
    for when, *_rest in history:
        label = f"{when:%m-%d %H:%M}"
        # jobs in the same minute still get a slot each on the ordinal time axis
        while label in labels:
            label += "*"
        labels.append(label)
    by_metric: dict[str, list[svg.Point]] = {}
    for label, (_when, metric, mean, _job) in zip(labels, history, strict=True):
        by_metric.setdefault(metric, []).append(svg.Point(label, mean, 1))
    return svg.line_chart(
        list(by_metric.items()),
        labels,
        label=f"Nested estimate of {len(history)} finished jobs over time",
        kind="history-point",
        y_title="nested estimate",
    )
