"""Every status change of a job and its work units, and what follows from each.

The one rule for a job that can no longer succeed (a unit failed in a worker, a unit the
reconciler gave up on, a fit that produced no number): the job fails with the first error, once,
its webhook notice is queued in the same transaction, and its units not yet started are
cancelled (units already running see the failed job at their next cancel check and stop). A
learning curve's parent then fails with it when its caller settles the curve (`curves`).

Callers own the session and its transaction; every move of a status goes through here, so a
status is written in one module and the webhook notice cannot be forgotten on one path.
"""

from __future__ import annotations

from datetime import timedelta
from typing import Any

from sqlalchemy import CursorResult, func, or_, select, update
from sqlalchemy.orm import Session

from service.notify.outbox import queue_job_notice
from service.store.db import utcnow
from service.store.models import Job, WorkUnit
from service.store.statuses import LIVE_JOB, OPEN_UNIT, JobStatus, UnitStatus

# A claim is a lease (settings.unit_lease): a copy that has not finished by then is presumed
# dead and the unit may be claimed again, at most this many times in all.
MAX_ATTEMPTS = 3


# -- queries every stage asks -------------------------------------------------------------------


def queued_unit_ids(session: Session, job_id: str) -> list[int]:
    """The job's units still waiting to be published or run, in id order."""
    return list(
        session.scalars(
            select(WorkUnit.id)
            .where(WorkUnit.job_id == job_id, WorkUnit.status == UnitStatus.QUEUED)
            .order_by(WorkUnit.id)
        )
    )


def units_not_done(session: Session, job_id: str) -> int:
    """How many of the job's units are not done (queued, running, failed or cancelled)."""
    count = session.scalar(
        select(func.count()).where(WorkUnit.job_id == job_id, WorkUnit.status != UnitStatus.DONE)
    )
    return int(count or 0)


def has_open_units(session: Session, job_id: str) -> bool:
    """True while a unit of the job is queued or running."""
    first = session.scalars(
        select(WorkUnit.id).where(WorkUnit.job_id == job_id, WorkUnit.status.in_(OPEN_UNIT))
    ).first()
    return first is not None


def is_stopped(job: Job) -> bool:
    """True once a job's units should stop between fits: cancel asked, or the job ended badly."""
    return bool(job.cancel_requested) or job.status in (JobStatus.FAILED, JobStatus.CANCELLED)


# -- units ------------------------------------------------------------------------------------


def claim_unit(session: Session, unit_id: int, worker: str, lease: timedelta) -> bool:
    """Move a unit to running if it is queued or its lease expired; False means a duplicate."""
    now = utcnow()
    claimed: CursorResult[Any] = session.execute(  # type: ignore[assignment]
        update(WorkUnit)
        .where(
            WorkUnit.id == unit_id,
            or_(
                WorkUnit.status == UnitStatus.QUEUED,
                (WorkUnit.status == UnitStatus.RUNNING) & (WorkUnit.lease_until < now),
            ),
            WorkUnit.attempts < MAX_ATTEMPTS,
            # a cancelled or failed job's message is dropped here, before any fit
            WorkUnit.job_id.in_(
                select(Job.id).where(Job.cancel_requested.is_(False), Job.status.in_(LIVE_JOB))
            ),
        )
        .values(
            status=UnitStatus.RUNNING,
            attempts=WorkUnit.attempts + 1,
            lease_until=now + lease,
            worker=worker,
            started_at=now,
        )
    )
    return claimed.rowcount == 1


def unit_done(session: Session, unit: WorkUnit, *, fits: int, seconds: float | None) -> bool:
    """Record a fitted unit as done and count it; True when it was the job's last open unit."""
    unit.status, unit.finished_at = UnitStatus.DONE, utcnow()
    unit.fits, unit.seconds = fits, seconds
    session.execute(update(Job).where(Job.id == unit.job_id).values(units_done=Job.units_done + 1))
    session.flush()
    return units_not_done(session, unit.job_id) == 0


def unit_reused(unit: WorkUnit, source_job_id: str) -> None:
    """Mark a queued unit done from the store (the caller counts it in the job's units_done)."""
    now = utcnow()
    unit.status, unit.reused, unit.source_job_id = UnitStatus.DONE, True, source_job_id
    unit.fits, unit.seconds, unit.started_at, unit.finished_at = 0, 0.0, now, now


def unit_cancelled(unit: WorkUnit) -> None:
    """A running unit that stopped between fits because its job was cancelled or failed."""
    unit.status, unit.error, unit.finished_at = UnitStatus.CANCELLED, None, utcnow()


def unit_failed(session: Session, unit: WorkUnit, error: str, *, job_error: str) -> None:
    """A unit that cannot finish: it fails, and its job with it (`fail_job`)."""
    unit.status, unit.error, unit.finished_at = UnitStatus.FAILED, error, utcnow()
    fail_job(session, unit.job_id, job_error)


def release_claims(session: Session, workers: list[str]) -> None:
    """Put the units these (stopped) workers were running back in the queue, attempt refunded."""
    session.execute(
        update(WorkUnit)
        .where(WorkUnit.status == UnitStatus.RUNNING, WorkUnit.worker.in_(workers))
        .values(
            status=UnitStatus.QUEUED,
            lease_until=None,
            worker=None,
            # a shutdown is not a failed attempt
            attempts=WorkUnit.attempts - 1,
        )
    )


# -- jobs -------------------------------------------------------------------------------------


def start_job(session: Session, job_id: str) -> None:
    """A queued job is running from its first claimed (or reused) unit on; idempotent."""
    session.execute(
        update(Job)
        .where(Job.id == job_id, Job.status == JobStatus.QUEUED)
        .values(status=JobStatus.RUNNING, started_at=utcnow())
    )


def _cancel_queued_units(session: Session, job_ids: list[str]) -> None:
    session.execute(
        update(WorkUnit)
        .where(WorkUnit.job_id.in_(job_ids), WorkUnit.status == UnitStatus.QUEUED)
        .values(status=UnitStatus.CANCELLED)
    )


def fail_job(session: Session, job_id: str, error: str) -> bool:
    """The one rule for a job that cannot succeed; True if this call ended it."""
    ended = session.scalar(
        update(Job)
        .where(Job.id == job_id, Job.status.in_(LIVE_JOB))
        .values(status=JobStatus.FAILED, finished_at=utcnow(), error=error)
        .returning(Job.id)
    )
    if ended is not None:  # this call made the job fail: its notice goes with it
        queue_job_notice(session, ended)
    # whoever ended it, units not yet started need not start
    _cancel_queued_units(session, [job_id])
    return ended is not None


def succeed_job(session: Session, job: Job, result: dict[str, Any]) -> None:
    """The elected fan-in caller stores result v1 and ends the job."""
    job.result = result
    job.status, job.stage, job.finished_at = JobStatus.SUCCEEDED, "done", utcnow()
    queue_job_notice(session, job.id)


def cancel_job(session: Session, job: Job) -> Job:
    """Flag a queued or running job cancelled; units stop between fits, queued ones never start."""
    if job.status in LIVE_JOB:
        job.cancel_requested, job.status, job.finished_at = True, JobStatus.CANCELLED, utcnow()
        queue_job_notice(session, job.id)
        _cancel_queued_units(session, [job.id])
        for child in session.scalars(select(Job).where(Job.parent_id == job.id)).all():
            cancel_job(session, child)  # a learning curve's selections stop with it
    return job


def cancel_children(session: Session, parent_id: str) -> None:
    """Stop a learning curve's live selections (the curve itself has ended)."""
    live = session.scalars(
        select(Job).where(Job.parent_id == parent_id, Job.status.in_(LIVE_JOB))
    ).all()
    for child in live:
        cancel_job(session, child)


def move_curve(session: Session, parent_id: str, values: dict[str, Any]) -> bool:
    """Write a learning curve's settled state if it is still live; True if this call did.

    Of several processes settling at once, the first to commit a final state wins, and only its
    final state queues the curve's notice.
    """
    moved: CursorResult[Any] = session.execute(  # type: ignore[assignment]
        update(Job).where(Job.id == parent_id, Job.status.in_(LIVE_JOB)).values(**values)
    )
    if moved.rowcount == 1 and values.get("status") in (
        JobStatus.SUCCEEDED,
        JobStatus.FAILED,
    ):
        queue_job_notice(session, parent_id)
    return moved.rowcount == 1
