"""Taking a learning-curve request in: check the sizes, plan every size, store the parent and one
selection job per size (see curves.settle for how the parent ends)."""

from __future__ import annotations

import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sqlalchemy.orm import Session

from service.config import Settings
from service.cv.errors import SpecError
from service.cv.plan import build_plan
from service.datasets.sources import LoadedTable
from service.errors import BadInput
from service.jobs.curves.settle import CURVE_KIND
from service.jobs.intake.create import create_job
from service.jobs.intake.prepare import PreparedJob, check_request_size, prepare_job
from service.jobs.intake.request import JobRequest, parse_job_request
from service.store.models import Job
from service.store.statuses import JobStatus

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
    if parse_job_request(_child_body(data, 1.0)).spec().interval.method == "nested":
        # a size below 1 fits on a share of each outer training part, which is not the
        # procedure the nested interval assesses (service/cv/intervals.check_interval)
        raise BadInput(
            "interval.method",
            "'nested' is not served on a learning curve's sizes; use 'quick' (the default) "
            "for a curve.",
        )
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
