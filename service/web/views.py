"""The numbers each report page shows, gathered from the store and drawn as SVG."""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.cv.cautions import PEOPLE_PREFIX
from service.cv.intervals import NESTED_COVERAGE, QUICK_COVERAGE, interval_words
from service.store.models import Job
from service.store.statuses import LIVE_JOB, JobStatus
from service.web import job_state, svg, svg_grid, validation_curves
from service.web.halving_view import halving_rounds
from service.web.queries import (
    inner_cells,
    job_candidates,
    stored_score_counts,
)
from service.web.ticks import metric_bounds, short

# the reader roles the page counts as inner fold scores: the job's own searches, every round
INNER_READER_ROLES = ("inner", "final_inner", "halving_inner", "halving_final_inner")


def fmt(value: float | None) -> str:
    """A score as the pages print it."""
    return "n/a" if value is None else f"{value:.4f}"


def sig(value: float | None) -> str:
    """A number to four significant figures (chart-side numbers, hyperparameter values)."""
    return "n/a" if value is None else short(value)


def signed(value: float) -> str:
    """A difference with its sign."""
    return f"{value:+.4f}"


def describe(candidate: dict[str, Any]) -> str:
    """'SVC(C=1, gamma=0.1)' from a result's candidate entry."""
    params = ", ".join(
        f"{k}={short(v) if isinstance(v, float) else validation_curves.value_label(v)}"
        for k, v in candidate["params"].items()
    )
    return f"{candidate['estimator']}({params})"


def learning_page(session: Session, job: Job) -> dict[str, Any]:
    """Context of a learning-curve job: estimated error against training size, with its spread."""
    result = job.result if job.status == JobStatus.SUCCEEDED else None
    children = session.execute(
        select(Job.id, Job.status, Job.request).where(Job.parent_id == job.id)
    ).all()
    sizes: list[dict[str, Any]] = sorted(
        (
            {"id": i, "status": st, "size": float((rq or {}).get("train_fraction", 1.0))}
            for i, st, rq in children
        ),
        key=lambda row: float(row["size"]),
    )
    context: dict[str, Any] = {"title": f"learning curve {job.id[:12]}", "job": job}
    context["result"] = result
    context["refresh"] = job.status in LIVE_JOB
    context["failure"] = job.error if job.status == JobStatus.FAILED else None
    context["sizes"] = sizes
    context["sizes_done"] = sum(1 for row in sizes if row["status"] == JobStatus.SUCCEEDED)
    if result:
        points = sorted(result["points"], key=lambda p: p["size"])
        labels = [f"{p['size']:.0%}" for p in points]
        context["points"] = points
        band = next(
            (p["error"].get("interval") for p in points if p["error"].get("interval")), None
        )
        context["interval_words"] = interval_words(band) if band else None
        context["chart"] = svg.band_chart(
            labels,
            [p["error"]["mean"] for p in points],
            [p["error"]["std"] for p in points],
            label=f"Estimated error ({result['error_formula']}) against training size",
            y_title=result["error_formula"],
        )
    return context


def _declared_log(request: dict[str, Any], estimator: str, key: str) -> bool:
    """Whether the request draws `key` of `estimator` from a log-scale range."""
    for family in request.get("families") or []:
        if family.get("estimator") == estimator:
            spec = (family.get("ranges") or {}).get(key) or {}
            if spec.get("log"):
                return True
    return False


def _numbers(family: validation_curves.Family, key: str) -> dict[str, float] | None:
    """Each value label of `key` with its number, when every value is a number (not a bool)."""
    out: dict[str, float] = {}
    for candidate in family.candidates:
        value = candidate.params.get(key)
        if isinstance(value, bool) or not isinstance(value, int | float):
            return None
        out[validation_curves.value_label(value)] = float(value)
    return out


def _people(cautions: list[str]) -> tuple[str | None, list[str]]:
    """The declared people caution (shown as a banner) and the other cautions, in order."""
    banner = next((c for c in cautions if c.startswith(PEOPLE_PREFIX)), None)
    return banner, [c for c in cautions if c != banner]


def job_page(session: Session, job: Job) -> dict[str, Any]:
    """Context of the job page: result v1 drawn, plus inner-score curves from SQL aggregates."""
    result = job.result if job.status == JobStatus.SUCCEEDED else None
    request = job.request or {}
    metric = (
        (result or {}).get("pick_by")
        or request.get("pick_by")
        or (request.get("metrics") or ["accuracy"])[0]
    )
    bounds = metric_bounds(metric)
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
            # a halving search's round folds are inner folds too, cut to each round's rows
            "inner": sum(counts.get(role, 0) for role in INNER_READER_ROLES),
            "outer": counts.get("outer", 0),
            "interval": counts.get("interval_outer", 0) + counts.get("interval_inner", 0),
        },
        "people": None,
        "halving": None,
        "progress": job_state.progress(job),
        "failure": job_state.failure(session, job) if job.status == JobStatus.FAILED else None,
        "refresh": job.status in LIVE_JOB,
    }
    if result:
        pick = result["estimate"][metric]
        context["pick"] = pick
        band = pick.get("interval")  # results from before intervals have no key at all
        context["interval_words"] = interval_words(band) if band else None
        context["interval_predates"] = "interval" not in pick
        coverage = {"quick": QUICK_COVERAGE, "nested": NESTED_COVERAGE}
        context["coverage"] = coverage.get(band["method"]) if band else None
        context["strip"] = svg.estimate_strip(
            pick["values"],
            pick["mean"],
            pick["std"],
            inner_best=result["final_pick"]["inner_mean"],
            label=f"Outer fold {metric} of the picked candidates, mean {fmt(pick['mean'])}",
            bounds=bounds,
            interval=(band["lower"], band["upper"], interval_words(band)) if band else None,
        )
        picked = {row["candidate_key"]: row["count"] for row in result["pick_frequency"]}
        items = [(describe(c.__dict__), picked.get(c.key, 0)) for c in candidates]
        context["bars"] = svg_grid.count_bars(
            items,
            label=f"Times each picked candidate was chosen by an outer fold, of {len(items)} "
            "candidates",
        )
        context["people"], context["cautions"] = _people(result.get("cautions", []))
        context["halving"] = halving_rounds(result)
    drawn = []
    heats = []
    for family in validation_curves.families(candidates):
        for key in family.varying:
            curve = validation_curves.validation_curve(family, key, cells)
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
                        bounds=bounds,
                        x_numbers=_numbers(family, key),
                        x_log=_declared_log(request, family.estimator, key),
                    ),
                }
            )
        grid = validation_curves.heat(family, cells)
        if grid is not None:
            heats.append(
                {
                    "estimator": grid.estimator,
                    "row_key": grid.row_key,
                    "col_key": grid.col_key,
                    "over": grid.over,
                    "svg": svg_grid.heat_map(
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
    context["validation_curves"], context["heats"] = drawn, heats
    return context
