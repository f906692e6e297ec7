"""Turning a request into a validated plan, before anything is stored."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.config import Settings
from service.cv.errors import SpecError
from service.cv.plan import SelectionPlan, build_plan
from service.cv.size import check_job_size
from service.datasets.sources import LoadedTable, load_table
from service.datasets.sql_source import SqlAccess
from service.datasets.store import stored_frame
from service.errors import BadInput
from service.jobs.intake.request import JobRequest, parse_job_request
from service.store.models import Dataset


@dataclass(frozen=True)
class PreparedJob:
    """A request that passed every check, with its table and plan."""

    request: JobRequest
    table: LoadedTable
    plan: SelectionPlan


def _registered(session: Session, content_hash: str, settings: Settings) -> LoadedTable:
    dataset = session.scalars(
        select(Dataset).where(Dataset.content_hash == content_hash)
    ).one_or_none()
    if dataset is None:
        raise BadInput(
            "dataset",
            f"no registered dataset has content hash {content_hash!r}; give a source object "
            'such as {"path": ...} instead, or check the hash.',
        )
    frame = stored_frame(session, content_hash, settings)
    kinds = {col["name"]: col["kind"] for col in dataset.columns}
    return LoadedTable(frame, kinds, content_hash, dict(dataset.origin))


def check_request_size(request: JobRequest, settings: Settings, *, sizes: int = 1) -> None:
    """Refuse a request past the job fits cap, before its table is loaded or planned."""
    try:
        check_job_size(request, max_fits=settings.max_job_fits, sizes=sizes)
    except SpecError as exc:
        raise BadInput(exc.field, exc.message) from None


def prepare_job(
    data: Any, *, session: Session, settings: Settings, base_dir: Path, team: str | None = None
) -> PreparedJob:
    """Parse, load and plan a job request for `team` (None: the local command line)."""
    request = parse_job_request(data)
    check_request_size(request, settings)
    if isinstance(request.dataset, str):
        table = _registered(session, request.dataset, settings)
    else:
        table = load_table(
            request.dataset,
            base_dir=base_dir,
            data_roots=settings.data_roots,
            sql=SqlAccess.for_team(settings, team),
        )
    try:
        plan = build_plan(request.spec(), table.frame, dict(table.kinds))
    except SpecError as exc:
        raise BadInput(exc.field, exc.message) from None
    return PreparedJob(request, table, plan)
