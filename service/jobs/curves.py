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

import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sqlalchemy import exists, or_, select
from sqlalchemy.orm import Session, aliased, sessionmaker

from service.config import Settings
from service.cv.errors import SpecError
from service.cv.plan import build_plan
from service.cv.selection import describe_values
from service.datasets.sources import LoadedTable
from service.errors import BadInput
from service.jobs import lifecycle
from service.jobs.prepare import PreparedJob, check_request_size, prepare_job
from service.jobs.request import JobRequest, parse_job_request
from service.jobs.submit import create_job
from service.store.db import utcnow
from service.store.models import Job
from service.store.statuses import BROKEN_JOB, LIVE_JOB, JobStatus

CURVE_KIND = "learning_curve"
MAX_SIZES = 10
_EXAMPLE = "e.g. [0.1, 0.25, 0.5, 1.0]"


@dataclass(frozen=True)
class PreparedCurve:
    """A learning-curve request that passed every check: one prepared selection per size."""

    body: dict[str, Any]
    sizes: list[float]
    children: list[PreparedJob]

    @property
    def table(self) -> LoadedTable:
        """The table every size selects on (the children share it)."""
        return self.children[0].table

    @property
    def request(self) -> JobRequest:
        """The request of the smallest size: every field but train_fraction is the curve's."""
        return self.children[0].request


def is_curve_request(data: Any) -> bool:
    """True for a body that asks for a learning curve; other `kind` values are refused."""
    if not isinstance(data, dict) or "kind" not in data:
        return False
    kind = data["kind"]
    if kind == CURVE_KIND:
        return True
    if kind == "selection":
        return False
    raise BadInput("kind", f"must be 'selection' or '{CURVE_KIND}' (got {kind!r}).")


def check_sizes(value: Any) -> list[float]:
    """The requested sizes as floats; raises BadInput naming `sizes` for anything else."""
    if not isinstance(value, list) or not value:
        raise BadInput(
            "sizes", f"give a non-empty list of fractions of the training part, {_EXAMPLE}."
        )
    if len(value) > MAX_SIZES:
        raise BadInput("sizes", f"at most {MAX_SIZES} sizes per curve (got {len(value)}).")
    sizes = []
    for item in value:
        # bool is an int to Python, but true is no fraction
        if isinstance(item, bool) or not isinstance(item, int | float) or not 0 < item <= 1:
            raise BadInput(
                "sizes", f"every size must be a fraction in (0, 1], {_EXAMPLE} (got {item!r})."
            )
        sizes.append(float(item))
    if len(set(sizes)) != len(sizes):
        raise BadInput("sizes", "a size is listed twice; list each once.")
    return sizes


def _child_body(data: dict[str, Any], size: float) -> dict[str, Any]:
    body = {k: v for k, v in data.items() if k not in ("kind", "sizes")}
    body["train_fraction"] = size
    return body


def prepare_curve(
    data: dict[str, Any],
    *,
    session: Session,
    settings: Settings,
    base_dir: Path,
    team: str | None = None,
) -> PreparedCurve:
    """Parse and plan every size of a learning-curve request; raises BadInput, stores nothing."""
    if "train_fraction" in data:
        raise BadInput("train_fraction", "is set per size by sizes in a learning curve; remove it.")
    if "sizes" not in data:
        raise BadInput("sizes", f"a learning curve needs sizes, {_EXAMPLE}.")
    sizes = check_sizes(data["sizes"])
    # every size is a whole selection: the job's fits cap holds for all of them together
    check_request_size(parse_job_request(_child_body(data, 1.0)), settings, sizes=len(sizes))
    # planned once at full size first, so a problem of the request itself keeps its own field
    whole = prepare_job(
        _child_body(data, 1.0), session=session, settings=settings, base_dir=base_dir, team=team
    )
    table = whole.table
    children = []
    for size in sizes:
        request = parse_job_request(_child_body(data, size))
        try:
            plan = build_plan(request.spec(), table.frame, dict(table.kinds))
        except SpecError as exc:
            # the same request planned at full size passed: the size made the part too small
            raise BadInput(
                "sizes", f"at size {size} of the outer training part, {exc.field}: {exc.message}"
            ) from None
        children.append(PreparedJob(request, table, plan))
    return PreparedCurve(dict(data), sizes, children)


def without_selection_kind(data: Any) -> Any:
    """The body with an explicit ``"kind": "selection"`` (the default) left out."""
    if isinstance(data, dict) and data.get("kind") == "selection":
        return {k: v for k, v in data.items() if k != "kind"}
    return data


def prepare_submission(
    data: Any, *, session: Session, settings: Settings, base_dir: Path, team: str | None = None
) -> PreparedJob | PreparedCurve:
    """A selection job or a learning curve, whichever the body asks for, for `team`."""
    if is_curve_request(data):
        return prepare_curve(data, session=session, settings=settings, base_dir=base_dir, team=team)
    return prepare_job(
        without_selection_kind(data),
        session=session,
        settings=settings,
        base_dir=base_dir,
        team=team,
    )


def create_curve(
    session: Session,
    prepared: PreparedCurve,
    settings: Settings,
    *,
    idempotency_key: str | None = None,
    team: str | None = None,
) -> str:
    """Store the parent and one selection job per size; returns the parent's id (caller commits)."""
    parent_id = uuid.uuid4().hex
    children = [create_job(session, child, settings) for child in prepared.children]
    total = 0
    for child_id in children:
        child = session.get_one(Job, child_id)
        child.parent_id = parent_id
        if team is not None:
            child.team = team
        total += child.units_total
    # stage "aggregating" from the start: the parent has no units, so neither the fan-in nor
    # the reconciler's stalled-job sweep (stages inner and outer) ever picks it up
    session.add(
        Job(
            id=parent_id,
            kind=CURVE_KIND,
            dataset_hash=prepared.table.content_hash,
            status=JobStatus.QUEUED,
            stage="aggregating",
            request=prepared.body,
            units_total=total,
            idempotency_key=idempotency_key,
            team=team or "local",
        )
    )
    session.flush()
    return parent_id


def create_submission(
    session: Session,
    prepared: PreparedJob | PreparedCurve,
    settings: Settings,
    *,
    idempotency_key: str | None = None,
    team: str | None = None,
) -> str:
    """Store a prepared selection job or learning curve; returns the id the caller follows."""
    if isinstance(prepared, PreparedCurve):
        return create_curve(session, prepared, settings, idempotency_key=idempotency_key, team=team)
    return create_job(
        session, prepared, settings, idempotency_key=idempotency_key, team=team or "local"
    )


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


def _as_error(metric: str, values: list[float]) -> dict[str, Any]:
    errors = [-v if metric.startswith("neg_") else 1.0 - v for v in values]
    return describe_values(errors)


def curve_result(parent: Job, children: list[Job]) -> dict[str, Any]:
    """The parent's result: one point per size from the children's result v1."""
    first = children[0].result or {}
    metric = first["pick_by"]
    points = []
    for child in children:
        result = child.result or {}
        outer = result["outer"]
        values = result["estimate"][metric]["values"]
        points.append(
            {
                "size": float(child.request.get("train_fraction", 1.0)),
                "job_id": child.id,
                "n_train_mean": sum(row["n_train"] for row in outer) / len(outer),
                "n_test_mean": sum(row["n_test"] for row in outer) / len(outer),
                "estimate": result["estimate"][metric],
                "error": _as_error(metric, values),
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
