"""Schedules behind the routes: create (validated against today's data), get, list, refreshes."""

from __future__ import annotations

import uuid
from pathlib import Path
from typing import Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.auth import Action, Principal, authorize, reaches_every_team
from service.config import Settings
from service.datasets.sources import DatasetSource, check_table_size
from service.errors import BadInput, not_visible
from service.jobs.intake.prepare import PreparedJob, prepare_job
from service.jobs.intake.request import bad_input_from
from service.notify.targets import check_webhook_target
from service.schedules.cron import next_after, parse_cron, zone
from service.store.db import utcnow
from service.store.followup_models import Refresh, Schedule


class ScheduleRequest(BaseModel):
    """The body of `POST /v1/schedules`."""

    model_config = ConfigDict(extra="forbid")

    source: DatasetSource
    template: dict[str, Any]
    cron: str = Field(min_length=1, max_length=100)
    timezone: str = Field(default="UTC", min_length=1, max_length=64)
    threshold: float | None = Field(default=None, allow_inf_nan=False)
    # "estimate": degraded when the estimate is below the threshold; "interval": only when the
    # interval's better bound is, i.e. when the job is confidently below (compare.py)
    degraded_on: Literal["estimate", "interval"] = "estimate"
    webhook: str | None = Field(default=None, min_length=1, max_length=2000)

    @field_validator("source")
    @classmethod
    def _changeable(cls, source: DatasetSource) -> DatasetSource:
        if source.sample is not None:
            raise ValueError(
                "a bundled sample never changes; give a {'path': ...} or {'sql': ...} source"
            )
        return source

    @model_validator(mode="after")
    def _judged_against_something(self) -> ScheduleRequest:
        if self.degraded_on == "interval" and self.threshold is None:
            raise ValueError(
                "degraded_on: 'interval' holds the interval's bound against the threshold; "
                "give a threshold too"
            )
        return self


def base_dir(settings: Settings) -> Path:
    """Where a schedule's relative paths start: the first data root, as for job requests."""
    return settings.data_roots[0] if settings.data_roots else settings.home


def job_body(schedule: Schedule) -> dict[str, Any]:
    """The job request a refresh submits: the template with the source as its dataset."""
    return {**schedule.template, "dataset": schedule.source}


def _prepare(body: dict[str, Any], session: Session, settings: Settings, team: str) -> PreparedJob:
    try:
        prepared = prepare_job(
            body, session=session, settings=settings, base_dir=base_dir(settings), team=team
        )
    except BadInput as exc:
        # the template's fields are named as they sit in the schedule body
        if exc.field.startswith("dataset"):
            field = "source" + exc.field.removeprefix("dataset")
        else:
            field = f"template.{exc.field}"
        raise BadInput(field, exc.message) from None
    check_table_size(
        prepared.table.frame,
        max_rows=settings.max_rows,
        max_columns=settings.max_columns,
        field="source",
    )
    return prepared


def create_schedule(
    session: Session, data: Any, *, principal: Principal, settings: Settings
) -> Schedule:
    """Validate everything (the template prepared against the current data), then store."""
    authorize(principal, Action.SCHEDULE)  # always for the caller's own team
    if not isinstance(data, dict):
        raise BadInput("request", "a schedule must be a JSON object; see the README example.")
    try:
        request = ScheduleRequest.model_validate(data)
    except ValidationError as exc:
        raise bad_input_from(exc) from None
    if "dataset" in request.template:
        raise BadInput(
            "template.dataset", "a template has no dataset: the schedule's source is it."
        )
    if request.source.path is not None and not settings.data_roots:
        raise BadInput(
            "source.path",
            "this server reads no files by path because FOLDWISE_DATA_ROOTS is not set; "
            "use a sql source or ask the operator for a data root.",
        )
    cron = parse_cron(request.cron)
    tz = zone(request.timezone)
    webhook = None
    if request.webhook is not None:  # kept as it will be sent: parsed and normalised
        webhook = check_webhook_target(request.webhook, settings, field="webhook")
    source = request.source.model_dump(exclude_none=True)
    _prepare({**request.template, "dataset": source}, session, settings, principal.team)
    schedule = Schedule(
        id=uuid.uuid4().hex,
        team=principal.team,
        source=source,
        template=request.template,
        cron=cron.text,
        timezone=request.timezone,
        threshold=request.threshold,
        degraded_on=request.degraded_on,
        webhook_url=webhook,
        next_due_at=next_after(cron, utcnow(), tz),
    )
    session.add(schedule)
    session.flush()
    return schedule


def get_schedule(
    session: Session, schedule_id: str, principal: Principal, action: Action = Action.READ
) -> Schedule:
    """The schedule, if the matrix lets the principal do `action` to it (else NotFound)."""
    schedule = session.get(Schedule, schedule_id)
    if schedule is None:
        raise not_visible("schedule", schedule_id)
    authorize(principal, action, schedule.team, what="schedule", ident=schedule_id)
    return schedule


def list_schedules(
    session: Session, principal: Principal, *, limit: int, offset: int
) -> tuple[list[Schedule], int]:
    """A page of the principal's schedules, newest first, and the total count."""
    query = select(Schedule)
    if not reaches_every_team(principal, Action.READ):
        query = query.where(Schedule.team == principal.team)
    total = session.scalar(select(func.count()).select_from(query.subquery()))
    rows = session.scalars(
        query.order_by(Schedule.created_at.desc(), Schedule.id).limit(limit).offset(offset)
    )
    return list(rows), int(total or 0)


def list_refreshes(
    session: Session, schedule: Schedule, *, limit: int, offset: int
) -> tuple[list[Refresh], int]:
    """A page of the schedule's refreshes, newest due time first, and the total count."""
    query = select(Refresh).where(Refresh.schedule_id == schedule.id)
    total = session.scalar(select(func.count()).select_from(query.subquery()))
    rows = session.scalars(
        query.order_by(Refresh.due_at.desc(), Refresh.id.desc()).limit(limit).offset(offset)
    )
    return list(rows), int(total or 0)
