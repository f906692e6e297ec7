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

import uuid
from datetime import timedelta
from typing import Any

from sqlalchemy import CursorResult, func, or_, select, update
from sqlalchemy.orm import Session

from service.jobs.history_point import history_point_of
from service.notify.outbox import queue_job_notice
from service.store.db import utcnow
from service.store.models import Job, WorkUnit
from service.store.statuses import LIVE_JOB, OPEN_UNIT, JobStatus, UnitStatus

# A claim is a lease (settings.unit_lease) its holder renews on a heartbeat: a claim not renewed
# in time is presumed dead and the unit may be claimed again, at most this many times in all.
MAX_ATTEMPTS = 3


class ClaimLost(Exception):
    """This copy's claim on a unit is no longer its own: another copy took it over."""


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


def queued_units_of_live_jobs(session: Session) -> list[int]:
    """Every queued unit of a queued or running job, oldest first: what a local pool hands out."""
    return list(
        session.scalars(
            select(WorkUnit.id)
            .join(Job, Job.id == WorkUnit.job_id)
            .where(WorkUnit.status == UnitStatus.QUEUED, Job.status.in_(LIVE_JOB))
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


def claim_statement(unit_ids: list[int], worker: str, lease: timedelta, token: str) -> Any:
    """The one claim rule, for one unit or a batch: queued, or running under a lapsed lease.

    A unit it leaves out is a duplicate: done, failed, running under a live lease, out of
    attempts, or of a stopped job.
    """
    now = utcnow()
    return (
        update(WorkUnit)
        .where(
            WorkUnit.id.in_(unit_ids),
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
            claim_token=token,
            started_at=now,
        )
    )


def claim_unit(session: Session, unit_id: int, worker: str, lease: timedelta) -> str | None:
    """Move a unit to running if it is queued or its lease expired; the claim's token, or None.

    None means a duplicate: the unit is done, failed, or running under a live lease.
    """
    token = uuid.uuid4().hex  # fences every later write of this copy (renew_lease, unit_done)
    claimed: CursorResult[Any] = session.execute(  # type: ignore[assignment]
        claim_statement([unit_id], worker, lease, token)
    )
    return token if claimed.rowcount == 1 else None


def _held(unit_id: int, token: str) -> Any:
    # the fence: this claim is still the unit's current one and the unit has not ended
    return (
        (WorkUnit.id == unit_id)
        & (WorkUnit.claim_token == token)
        & (WorkUnit.status == UnitStatus.RUNNING)
    )


def renew_lease(session: Session, unit_id: int, token: str, lease: timedelta) -> bool:
    """Extend this claim's lease from now; False when the claim is gone (taken over or ended)."""
    renewed: CursorResult[Any] = session.execute(  # type: ignore[assignment]
        update(WorkUnit).where(_held(unit_id, token)).values(lease_until=utcnow() + lease)
    )
    return renewed.rowcount == 1


def unit_done(
    session: Session, unit_id: int, token: str, *, fits: int, seconds: float | None
) -> bool:
    """Record a fitted unit as done and count it; True when it was the job's last open unit.

    Raises ClaimLost when the claim is no longer this copy's: the caller's transaction (its
    scores included) must roll back, so two copies of a unit can never both count.
    """
    moved: CursorResult[Any] = session.execute(  # type: ignore[assignment]
        update(WorkUnit)
        .where(_held(unit_id, token))
        .values(status=UnitStatus.DONE, finished_at=utcnow(), fits=fits, seconds=seconds)
    )
    if moved.rowcount != 1:
        raise ClaimLost(f"unit {unit_id}: this copy's claim was taken over; nothing recorded")
    job_id = session.scalars(select(WorkUnit.job_id).where(WorkUnit.id == unit_id)).one()
    session.execute(update(Job).where(Job.id == job_id).values(units_done=Job.units_done + 1))
    return units_not_done(session, job_id) == 0


def unit_reused(unit: WorkUnit, source_job_id: str) -> None:
    """Mark a queued unit done from the store (the caller counts it in the job's units_done)."""
    now = utcnow()
    unit.status, unit.reused, unit.source_job_id = UnitStatus.DONE, True, source_job_id
    unit.fits, unit.seconds, unit.started_at, unit.finished_at = 0, 0.0, now, now


def claim_cancelled(session: Session, unit_id: int, token: str) -> bool:
    """A claimed unit that stopped between fits (job cancelled or failed); False: not ours."""
    moved: CursorResult[Any] = session.execute(  # type: ignore[assignment]
        update(WorkUnit)
        .where(_held(unit_id, token))
        .values(status=UnitStatus.CANCELLED, error=None, finished_at=utcnow())
    )
    return moved.rowcount == 1


def claim_failed(session: Session, unit_id: int, token: str, error: str, *, job_error: str) -> bool:
    """A claimed unit that cannot finish fails, and its job with it; False: not ours, no change."""
    moved: CursorResult[Any] = session.execute(  # type: ignore[assignment]
        update(WorkUnit)
        .where(_held(unit_id, token))
        .values(status=UnitStatus.FAILED, error=error, finished_at=utcnow())
    )
    if moved.rowcount != 1:
        return False
    job_id = session.scalars(select(WorkUnit.job_id).where(WorkUnit.id == unit_id)).one()
    fail_job(session, job_id, job_error)
    return True


def unit_failed(session: Session, unit: WorkUnit, error: str, *, job_error: str) -> None:
    """A unit given up on (no live claim): it fails, and its job with it (`fail_job`)."""
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
            claim_token=None,
            # a shutdown is not a failed attempt
            attempts=WorkUnit.attempts - 1,
        )
    )


def running_holders(session: Session, prefix: str) -> list[str]:
    """The workers named `prefix`... that hold a running unit now."""
    return list(
        session.scalars(
            select(WorkUnit.worker)
            .where(WorkUnit.status == UnitStatus.RUNNING, WorkUnit.worker.startswith(prefix))
            .distinct()
        )
    )


def expire_leases(session: Session, workers: list[str]) -> None:
    """End the leases of these workers' claims now: they are known dead, not merely silent.

    The units are then taken again as any lapsed claim is (a new claim, one more attempt), so
    a unit whose process keeps dying still ends at MAX_ATTEMPTS.
    """
    if workers:
        session.execute(
            update(WorkUnit)
            .where(WorkUnit.status == UnitStatus.RUNNING, WorkUnit.worker.in_(workers))
            .values(lease_until=utcnow())
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
    """The one rule for a job that cannot succeed; True if this call ended it.

    Units before the job row, as a claim takes them (`cancel_job` says why).
    """
    # whoever ends it, units not yet started need not start
    _cancel_queued_units(session, [job_id])
    ended = session.scalar(
        update(Job)
        .where(Job.id == job_id, Job.status.in_(LIVE_JOB))
        .values(status=JobStatus.FAILED, finished_at=utcnow(), error=error)
        .returning(Job.id)
    )
    if ended is not None:  # this call made the job fail: its notice goes with it
        queue_job_notice(session, ended)
    return ended is not None


def succeed_job(session: Session, job: Job, result: dict[str, Any]) -> None:
    """The elected fan-in caller stores result v1 and ends the job."""
    job.result = result
    job.history_point = history_point_of(result)
    job.status, job.stage, job.finished_at = JobStatus.SUCCEEDED, "done", utcnow()
    queue_job_notice(session, job.id)


def cancel_job(session: Session, job: Job) -> Job:
    """Flag a queued or running job cancelled; units stop between fits, queued ones never start.

    One conditional UPDATE decides, not the loaded row: a unit failing the job at the same
    moment (fail_job, equally conditional) and this cancel cannot both end it, so the job ends
    failed or cancelled and exactly one notice is queued.

    Lock order: a claim locks its units, then the job's row (`start_job`), so a cancel takes the
    queued units first and the job's row after. Taking the row first deadlocked on PostgreSQL
    against the first claim of a queued job, and the store aborted one side (the cancel's answer
    was a 500). The second pass after the row catches units a stage's advance added in between;
    a claim of those never waits on the row, as their job is already running.
    """
    _cancel_queued_units(session, [job.id])
    ended: CursorResult[Any] = session.execute(  # type: ignore[assignment]
        update(Job)
        .where(Job.id == job.id, Job.status.in_(LIVE_JOB))
        .values(cancel_requested=True, status=JobStatus.CANCELLED, finished_at=utcnow())
    )
    session.refresh(job)
    if ended.rowcount == 1:
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
