"""Schedule routes: create, list, get, the refreshes so far, and a refresh now."""

from __future__ import annotations

import logging
from typing import Annotated, Any

from fastapi import APIRouter, Body, Path, Query, Response

from service.api.schedules.schemas import (
    RefreshList,
    RefreshPublic,
    ScheduleLinks,
    ScheduleList,
    SchedulePublic,
)
from service.auth import Action
from service.http.deps import (
    DispatcherDep,
    ReaderDep,
    SchedulerDep,
    SessionDep,
    SessionsDep,
    SettingsDep,
)
from service.http.json_body import StrictJsonRoute
from service.http.limits import MAX_SQL_INT
from service.http.problems import problem_responses
from service.schedules import definitions
from service.schedules.tick import trigger_refresh
from service.store.followup_models import Refresh, Schedule

log = logging.getLogger(__name__)
router = APIRouter(prefix="/v1/schedules", tags=["schedules"], route_class=StrictJsonRoute)

ScheduleId = Annotated[str, Path(max_length=64, description="The schedule's id.")]


def _public(schedule: Schedule) -> SchedulePublic:
    base = f"/v1/schedules/{schedule.id}"
    return SchedulePublic(
        id=schedule.id,
        team=schedule.team,
        source=schedule.source,
        template=schedule.template,
        cron=schedule.cron,
        timezone=schedule.timezone,
        threshold=schedule.threshold,
        degraded_on=schedule.degraded_on,
        webhook=schedule.webhook_url,
        active=schedule.active,
        next_due_at=schedule.next_due_at,
        created_at=schedule.created_at,
        links=ScheduleLinks(
            schedule=base, refreshes=f"{base}/refreshes", refresh=f"{base}/refresh"
        ),
    )


def _refresh(row: Refresh) -> RefreshPublic:
    return RefreshPublic.model_validate(row, from_attributes=True)


@router.post(
    "",
    response_model=SchedulePublic,
    status_code=201,
    summary="Create a schedule: a changeable source, a job template, a cron expression",
    description=(
        "The template (job request v1 without `dataset`) is prepared against the source's "
        "current rows before anything is stored, so a schedule that could not run is refused."
    ),
    responses=problem_responses(400, 401, 403, 413, 422),
)
def create_schedule(
    body: Annotated[dict[str, Any], Body(description="source, template, cron, timezone, ...")],
    principal: SchedulerDep,
    session: SessionDep,
    settings: SettingsDep,
    response: Response,
) -> SchedulePublic:
    """Validate, store, answer 201 with Location."""
    schedule = definitions.create_schedule(session, body, principal=principal, settings=settings)
    session.commit()
    response.headers["Location"] = f"/v1/schedules/{schedule.id}"
    return _public(schedule)


@router.get(
    "",
    response_model=ScheduleList,
    summary="List schedules, newest first",
    responses=problem_responses(401, 403, 422),
)
def list_schedules(
    principal: ReaderDep,
    session: SessionDep,
    limit: Annotated[int, Query(ge=1, le=200)] = 50,
    offset: Annotated[int, Query(ge=0, le=MAX_SQL_INT)] = 0,
) -> ScheduleList:
    """The caller's team's schedules (an analyst's: every team's)."""
    rows, count = definitions.list_schedules(session, principal, limit=limit, offset=offset)
    return ScheduleList(data=[_public(s) for s in rows], count=count)


@router.get(
    "/{schedule_id}",
    response_model=SchedulePublic,
    summary="Get a schedule",
    responses=problem_responses(401, 403, 404, 422),
)
def get_schedule(
    schedule_id: ScheduleId, principal: ReaderDep, session: SessionDep
) -> SchedulePublic:
    """Another team's schedule is a 404."""
    return _public(definitions.get_schedule(session, schedule_id, principal))


@router.get(
    "/{schedule_id}/refreshes",
    response_model=RefreshList,
    summary="The schedule's refreshes, newest first",
    responses=problem_responses(401, 403, 404, 422),
)
def list_refreshes(
    schedule_id: ScheduleId,
    principal: ReaderDep,
    session: SessionDep,
    limit: Annotated[int, Query(ge=1, le=200)] = 50,
    offset: Annotated[int, Query(ge=0, le=MAX_SQL_INT)] = 0,
) -> RefreshList:
    """Each with its status, job and comparison."""
    schedule = definitions.get_schedule(session, schedule_id, principal)
    rows, count = definitions.list_refreshes(session, schedule, limit=limit, offset=offset)
    return RefreshList(data=[_refresh(r) for r in rows], count=count)


@router.post(
    "/{schedule_id}/refresh",
    response_model=RefreshPublic,
    status_code=202,
    summary="Refresh now: re-read the source; unchanged data recomputes nothing",
    responses=problem_responses(401, 403, 404, 422),
)
def refresh_now(
    schedule_id: ScheduleId,
    principal: SchedulerDep,
    sessions: SessionsDep,
    settings: SettingsDep,
    dispatcher: DispatcherDep,
) -> RefreshPublic:
    """202 with the refresh; a new job's units are published after the commit.

    Needs the `submit` scope and a schedule of the token's own team: another team's schedule
    answers 404, as a missing one does, analyst tokens included.
    """
    # Short sessions, no request-wide one: on SQLite an open transaction holds the write lock
    # the refresh's own transaction needs.
    with sessions() as session:
        definitions.get_schedule(session, schedule_id, principal, Action.SCHEDULE)
    refresh_id, units = trigger_refresh(sessions, schedule_id, settings)
    if units:
        try:
            dispatcher.publish(units)
        except Exception:
            log.exception(
                "publishing refresh %s failed; the reconciler will publish it", refresh_id
            )
    with sessions() as session:
        return _refresh(session.get_one(Refresh, refresh_id))
