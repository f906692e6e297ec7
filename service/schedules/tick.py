"""The schedule tick: claim due times, refresh (or record unchanged), finish refreshes.

A due time is claimed by inserting its refresh row under the unique (schedule, due time) key with
ON CONFLICT DO NOTHING, in the same transaction that reads the source and submits the job; on
PostgreSQL a second tick's insert waits for the first transaction and then inserts nothing, so two
ticks at once make one refresh and one job (docs/schedules.md).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from sqlalchemy import CursorResult, select, update
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.orm import Session, sessionmaker

from service.auth import Principal
from service.config import Settings
from service.datasets.sources import DatasetSource, load_table
from service.datasets.sql_source import SqlAccess
from service.errors import BadInput
from service.jobs.intake.start import start_submitted
from service.jobs.intake.submit import submit_job
from service.notify.outbox import REFRESH_EVENT, queue_delivery
from service.schedules.compare import compare_results, refresh_status
from service.schedules.cron import next_after, parse_cron, zone
from service.schedules.definitions import base_dir, job_body
from service.store.db import utcnow
from service.store.followup_models import Refresh, Schedule
from service.store.models import Job, JobFold
from service.store.statuses import ENDED_JOB, JobStatus

log = logging.getLogger(__name__)
FINAL = ENDED_JOB
LIVE = (JobStatus.QUEUED, JobStatus.RUNNING, JobStatus.SUCCEEDED)


@dataclass
class TickReport:
    """What a tick did: refreshes made, units to publish, refreshes finished."""

    refreshes: list[int] = field(default_factory=list)
    units: list[int] = field(default_factory=list)
    finished: list[int] = field(default_factory=list)


def _claim(session: Session, schedule_id: str, due_at: datetime, trigger: str) -> int | None:
    values = {
        "schedule_id": schedule_id,
        "due_at": due_at,
        "trigger": trigger,
        "status": "pending",
        "created_at": utcnow(),
    }
    dialect = session.get_bind().dialect.name
    insert = postgresql.insert if dialect == "postgresql" else sqlite.insert
    statement = insert(Refresh).values(values).on_conflict_do_nothing().returning(Refresh.id)
    return session.scalar(statement)


def _latest_job(session: Session, schedule_id: str, statuses: tuple[str, ...]) -> Job | None:
    return session.scalars(
        select(Job)
        .where(Job.schedule_id == schedule_id, Job.status.in_(statuses))
        .order_by(Job.created_at.desc(), Job.id.desc())
        .limit(1)
    ).first()


def _notify(session: Session, schedule: Schedule, refresh: Refresh) -> None:
    if not schedule.webhook_url:
        return
    queue_delivery(
        session,
        team=schedule.team,
        url=schedule.webhook_url,
        event=REFRESH_EVENT,
        body=refresh_notice(refresh),
        refresh_id=refresh.id,
    )


def refresh_notice(refresh: Refresh) -> dict[str, Any]:
    """The JSON a refresh's webhook and the API show."""
    return {
        "refresh_id": refresh.id,
        "schedule_id": refresh.schedule_id,
        "due_at": refresh.due_at.isoformat(),
        "trigger": refresh.trigger,
        "status": refresh.status,
        "dataset_hash": refresh.dataset_hash,
        "job_id": refresh.job_id,
        "previous_job_id": refresh.previous_job_id,
        "comparison": refresh.comparison,
        "error": refresh.error,
        "finished_at": refresh.finished_at.isoformat() if refresh.finished_at else None,
    }


def _end(session: Session, schedule: Schedule, refresh: Refresh, status: str) -> None:
    refresh.status, refresh.finished_at = status, utcnow()
    session.flush()
    _notify(session, schedule, refresh)


def refresh_schedule(
    session: Session, schedule: Schedule, due_at: datetime, trigger: str, settings: Settings
) -> Refresh | None:
    """Claim (schedule, due_at) and refresh; None if another tick already claimed it."""
    refresh_id = _claim(session, schedule.id, due_at, trigger)
    if refresh_id is None:
        return None
    refresh = session.get_one(Refresh, refresh_id)
    try:
        table = load_table(
            DatasetSource.model_validate(schedule.source),
            base_dir=base_dir(settings),
            data_roots=settings.data_roots,
            field="source",
            sql=SqlAccess.for_team(settings, schedule.team),
        )
    except BadInput as exc:
        refresh.error = f"the source could not be read: {exc}"
        _end(session, schedule, refresh, "failed")
        return refresh
    refresh.dataset_hash = table.content_hash
    last = _latest_job(session, schedule.id, LIVE)
    if last is not None and last.dataset_hash == table.content_hash:
        # the data is what the last job saw: nothing to recompute
        refresh.previous_job_id = last.id
        _end(session, schedule, refresh, "unchanged")
        return refresh
    previous = _latest_job(session, schedule.id, (JobStatus.SUCCEEDED,))
    principal = Principal(schedule.team, frozenset({"submit"}))
    try:
        with session.begin_nested():  # a refused submission leaves no half-written job behind
            submitted = submit_job(
                session,
                job_body(schedule),
                principal=principal,
                settings=settings,
                base_dir=base_dir(settings),
            )
    except BadInput as exc:
        refresh.error = f"the template no longer makes a valid job: {exc}"
        _end(session, schedule, refresh, "failed")
        return refresh
    submitted.job.schedule_id = schedule.id
    refresh.job_id = submitted.job.id
    refresh.previous_job_id = previous.id if previous is not None else None
    refresh.status = "running"
    session.flush()
    return refresh


def _advance_due(schedule: Schedule, now: datetime) -> None:
    # the next time after now, not after the due time: a server that was down for a week makes
    # one refresh when it comes back, not one per missed night
    schedule.next_due_at = next_after(parse_cron(schedule.cron), now, zone(schedule.timezone))


def tick_schedules(
    sessions: sessionmaker[Session], settings: Settings, *, now: datetime | None = None
) -> TickReport:
    """Refresh every schedule due at `now`, then finish refreshes whose job has ended."""
    now = now or utcnow()
    report = TickReport()
    with sessions() as session:
        due = list(
            session.execute(
                select(Schedule.id, Schedule.next_due_at)
                .where(Schedule.active.is_(True), Schedule.next_due_at <= now)
                # oldest due first, each in its own transaction: a tick that dies half-way
                # leaves the rest due, and the next tick takes them (the unique key on
                # (schedule, due time) keeps the ones done from being done twice)
                .order_by(Schedule.next_due_at, Schedule.id)
            )
        )
    for schedule_id, due_at in due:
        if due_at is None:
            continue
        try:
            with sessions.begin() as session:
                schedule = session.get_one(Schedule, schedule_id)
                refresh = refresh_schedule(session, schedule, due_at, "tick", settings)
                if schedule.next_due_at == due_at:
                    _advance_due(schedule, now)
                job_id = refresh.job_id if refresh is not None else None
                if refresh is not None:
                    report.refreshes.append(refresh.id)
            if job_id:  # committed: started as every new job is, reused or not
                report.units += start_submitted(sessions, job_id, settings)
        except Exception:  # one broken schedule must not stop the others
            log.exception("refreshing schedule %s failed", schedule_id)
    report.finished = finish_refreshes(sessions)
    return report


def _outer_folds(session: Session, job_id: str) -> list[str]:
    return list(
        session.scalars(
            select(JobFold.fingerprint)
            .where(JobFold.job_id == job_id, JobFold.role == "outer")
            .order_by(JobFold.repeat, JobFold.fold_index)
        )
    )


def finish_refreshes(sessions: sessionmaker[Session]) -> list[int]:
    """Compare each running refresh whose job ended with the previous job; returns their ids."""
    with sessions() as session:
        ended = list(
            session.scalars(
                select(Refresh.id)
                .join(Job, Job.id == Refresh.job_id)
                .where(Refresh.status == "running", Job.status.in_(FINAL))
            )
        )
    done = []
    for refresh_id in ended:
        with sessions.begin() as session:
            refresh = session.get_one(Refresh, refresh_id)
            schedule = session.get_one(Schedule, refresh.schedule_id)
            job = session.get_one(Job, refresh.job_id)
            if job.status != JobStatus.SUCCEEDED or not job.result:
                status, comparison = "failed", None
                error: str | None = f"job {job.id} {job.status}: {job.error or 'no result'}"
            else:
                previous = (
                    session.get(Job, refresh.previous_job_id) if refresh.previous_job_id else None
                )
                comparison = compare_results(
                    job.result,
                    previous.result if previous is not None else None,
                    new_folds=_outer_folds(session, job.id),
                    old_folds=_outer_folds(session, previous.id) if previous else [],
                    threshold=schedule.threshold,
                )
                status, error = refresh_status(comparison), None
            moved: CursorResult[Any] = session.execute(  # type: ignore[assignment]
                update(Refresh)
                .where(Refresh.id == refresh_id, Refresh.status == "running")
                .values(status=status, comparison=comparison, error=error, finished_at=utcnow())
            )
            if moved.rowcount != 1:
                continue  # another tick finished it first
            session.refresh(refresh)
            _notify(session, schedule, refresh)
            done.append(refresh_id)
    return done


def trigger_refresh(
    sessions: sessionmaker[Session], schedule_id: str, settings: Settings
) -> tuple[int, list[int]]:
    """Refresh now, outside the cron: the refresh id and the units to publish."""
    with sessions.begin() as session:
        schedule = session.get_one(Schedule, schedule_id)
        refresh = refresh_schedule(session, schedule, utcnow(), "manual", settings)
        assert refresh is not None  # a due time of this very microsecond is ours alone
        refresh_id, job_id = refresh.id, refresh.job_id
    return refresh_id, start_submitted(sessions, job_id, settings) if job_id else []
