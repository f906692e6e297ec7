"""Learning curves: nested selection at several training-set sizes, to ask if more data helps.

A learning-curve request is job request v1 plus ``"kind": "learning_curve"`` and ``sizes``
(fractions of each outer training part). It is stored as a parent job (kind learning_curve, no
units of its own) and one ordinary selection job per size (``parent_id`` = the parent) whose
request carries ``train_fraction`` = size; the engine subsamples each outer training part
(service.cv.subsample) and keeps the outer test folds, so every size is scored on the same rows.
Whoever finishes a child's last stage calls `settle_parent`, after its own commit; the parent's
result is assembled once every child succeeded (a conditional UPDATE elects one writer), and the
parent fails, cancelling the other children, as soon as one child fails.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import exists, or_, select
from sqlalchemy.orm import Session, aliased, sessionmaker

from service.cv.describe import describe_values
from service.jobs import lifecycle
from service.store.db import utcnow
from service.store.models import Job
from service.store.statuses import BROKEN_JOB, LIVE_JOB, JobStatus

CURVE_KIND = "learning_curve"


def child_ids(session: Session, parent_id: str) -> list[str]:
    """A curve's selection jobs, smallest size first."""
    children = session.scalars(select(Job).where(Job.parent_id == parent_id))
    ordered = sorted(children, key=lambda j: float(j.request.get("train_fraction", 1.0)))
    return [j.id for j in ordered]


def error_formula(metric: str) -> str:
    """How a score becomes an error: minus a neg_* score, otherwise one minus the score."""
    # every metric here is "higher is better"; neg_* are negated losses, the rest top out at 1
    # (accuracy, AUC, F1, R^2: for R^2, 1 - R^2 is the share of variance left unexplained)
    return f"-{metric}" if metric.startswith("neg_") else f"1 - {metric}"


def _as_error(metric: str, estimate: dict[str, Any]) -> dict[str, Any]:
    """The estimate as an error, its interval carried over by the same decreasing map.

    Both error formulas (-score, 1 - score) reverse the order, so the score's upper bound gives
    the error's lower bound; the se and df are unchanged (the map has slope -1).
    """
    negated = metric.startswith("neg_")
    errors = [-v if negated else 1.0 - v for v in estimate["values"]]
    out = describe_values(errors)
    band = estimate.get("interval")  # null when the size's job could not serve one
    if band is not None:
        low, high = (
            (-band["upper"], -band["lower"]) if negated else (1 - band["upper"], 1 - band["lower"])
        )
        out["interval"] = {**band, "lower": low, "upper": high}
    else:
        out["interval"] = None
    return out


def curve_result(parent: Job, children: list[Job]) -> dict[str, Any]:
    """The parent's result: one point per size from the children's result v1."""
    first = children[0].result or {}
    metric = first["pick_by"]
    points = []
    for child in children:
        result = child.result or {}
        outer = result["outer"]
        points.append(
            {
                "size": float(child.request.get("train_fraction", 1.0)),
                "job_id": child.id,
                "n_train_mean": sum(row["n_train"] for row in outer) / len(outer),
                "n_test_mean": sum(row["n_test"] for row in outer) / len(outer),
                "estimate": result["estimate"][metric],
                "error": _as_error(metric, result["estimate"][metric]),
            }
        )
    return {
        "kind": CURVE_KIND,
        "dataset_hash": parent.dataset_hash,
        "task": first["task"],
        "n_rows": first["n_rows"],
        "pick_by": metric,
        "error_formula": error_formula(metric),
        "points": points,
        "jobs": [c.id for c in children],
    }


def settle_curve(sessions: sessionmaker[Session], parent_id: str) -> None:
    """Bring a curve up to date with its children: progress, failure, or the finished result."""
    with sessions.begin() as session:
        parent = session.get_one(Job, parent_id)
        if parent.status not in LIVE_JOB:
            return
        children = [session.get_one(Job, i) for i in child_ids(session, parent_id)]
        values: dict[str, Any] = {
            "units_done": sum(c.units_done for c in children),
            "units_total": sum(c.units_total for c in children),
        }
        broken = next((c for c in children if c.status in BROKEN_JOB), None)
        if broken is not None:
            size = broken.request.get("train_fraction")
            values |= {
                "status": JobStatus.FAILED,
                "stage": "done",
                "finished_at": utcnow(),
                "error": f"the selection at size {size} (job {broken.id}) {broken.status}: "
                f"{broken.error or 'no error text'}",
            }
        elif all(c.status == JobStatus.SUCCEEDED for c in children):
            values |= {
                "status": JobStatus.SUCCEEDED,
                "stage": "done",
                "finished_at": utcnow(),
                "result": curve_result(parent, children),
            }
        elif any(c.status == JobStatus.RUNNING for c in children):
            values |= {"status": JobStatus.RUNNING, "started_at": parent.started_at or utcnow()}
        lifecycle.move_curve(session, parent_id, values)
        if broken is not None:
            lifecycle.cancel_children(session, parent_id)


def settle_parent(sessions: sessionmaker[Session], job_id: str) -> None:
    """If `job_id` is a curve's selection job, settle that curve (call after committing)."""
    with sessions() as session:
        parent_id = session.scalar(select(Job.parent_id).where(Job.id == job_id))
    if parent_id is not None:
        settle_curve(sessions, parent_id)


def settle_live_curves(sessions: sessionmaker[Session]) -> list[str]:
    """Settle live curves whose sizes have all ended or one broke; returns their ids.

    Whoever ends a size settles its curve, but a size can end without such a caller (the
    reconciler gives up on a unit, or moves a stalled job on): the reconciler's tick heals that.
    """
    child = aliased(Job)
    ended_or_broken = or_(
        ~exists().where(child.parent_id == Job.id, child.status.in_(LIVE_JOB)),
        exists().where(child.parent_id == Job.id, child.status.in_(BROKEN_JOB)),
    )
    with sessions() as session:
        due = list(
            session.scalars(
                select(Job.id).where(
                    Job.kind == CURVE_KIND, Job.status.in_(LIVE_JOB), ended_or_broken
                )
            )
        )
    for parent_id in due:
        settle_curve(sessions, parent_id)
    return due
