"""The reconciler: the store is the truth, the broker only transport.

A Redis without persistence loses its queues on restart, and a killed worker leaves a unit
running under a lease nobody will renew. On every tick the reconciler finds units the store says
are unfinished and whose message may be lost, and jobs whose last unit landed without anyone
moving them on.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta

from sqlalchemy import and_, func, or_, select
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.jobs import lifecycle
from service.jobs.curves.settle import settle_live_curves
from service.jobs.intake.start import start_if_settled
from service.jobs.lifecycle import MAX_ATTEMPTS
from service.store.db import utcnow
from service.store.models import Job, WorkUnit
from service.store.statuses import LIVE_JOB, UnitStatus


@dataclass(frozen=True)
class Reconciled:
    """What one tick found: units to publish again, jobs moved on, units given up on."""

    republish: list[int]
    advanced: list[str]
    abandoned: list[int]


def _give_up(session: Session) -> list[int]:
    # a unit whose every attempt died (its lease ran out each time): a crash, said as one
    now = utcnow()
    dead = list(
        session.scalars(
            select(WorkUnit.id).where(
                WorkUnit.status == UnitStatus.RUNNING,
                WorkUnit.lease_until < now,
                WorkUnit.attempts >= MAX_ATTEMPTS,
            )
        )
    )
    for unit_id in dead:
        unit = session.get_one(WorkUnit, unit_id)
        # every claim ended with the lease running out and nothing recorded: the process died
        # (a fit that raises, or the soft time limit, records its own failure instead)
        error = (
            f"the worker process running unit {unit_id} ({unit.kind} {unit.scope}) died "
            f"{unit.attempts} times (killed, out of memory, or stopped at the hard time limit "
            f"FOLDWISE_UNIT_TIME_LIMIT), last on {unit.worker or 'an unknown worker'}; "
            "see that machine's worker log."
        )
        # the same rule as a unit failing in a worker (lifecycle.fail_job)
        lifecycle.unit_failed(session, unit, error, job_error=error)
    return dead


def _lost(session: Session, settings: Settings) -> list[int]:
    now = utcnow()
    stale = now - timedelta(seconds=settings.republish_after)
    live_jobs = select(Job.id).where(Job.status.in_(LIVE_JOB), Job.cancel_requested.is_(False))
    return list(
        session.scalars(
            select(WorkUnit.id)
            .where(
                WorkUnit.job_id.in_(live_jobs),
                or_(
                    and_(
                        WorkUnit.status == UnitStatus.QUEUED,
                        or_(WorkUnit.published_at.is_(None), WorkUnit.published_at < stale),
                    ),
                    and_(
                        WorkUnit.status == UnitStatus.RUNNING,
                        WorkUnit.lease_until < now,
                        WorkUnit.attempts < MAX_ATTEMPTS,
                    ),
                ),
            )
            .order_by(WorkUnit.id)
        )
    )


def _stalled(session: Session) -> list[str]:
    open_units = (
        select(func.count())
        .where(WorkUnit.job_id == Job.id, WorkUnit.status != UnitStatus.DONE)
        .correlate(Job)
        .scalar_subquery()
    )
    return list(
        session.scalars(
            select(Job.id).where(
                # queued with nothing open: every unit came from the store and the creator did
                # not get to start it (intake.start.start_submitted)
                Job.status.in_(LIVE_JOB),
                Job.stage.in_(("inner", "outer")),
                open_units == 0,
            )
        )
    )


def reconcile(sessions: sessionmaker[Session], settings: Settings) -> Reconciled:
    """One tick: give up on poison units, move stalled jobs on, list units to publish again."""
    with sessions.begin() as session:
        abandoned = _give_up(session)
    with sessions() as session:
        stalled = _stalled(session)
    for job_id in stalled:
        start_if_settled(sessions, job_id, settings)  # marks it running, then advance_job
    settle_live_curves(sessions)  # learning curves whose sizes ended without settling them
    with sessions() as session:
        republish = _lost(session, settings)
    return Reconciled(republish, stalled, abandoned)
