"""The reconciler: the store is the truth, the broker only transport.

A Redis without persistence loses its queues on restart, and a killed worker leaves a unit
running under a lease nobody will renew. On every tick the reconciler finds units and audits the
store says are waiting and whose message is lost, and jobs whose last unit landed without anyone
moving them on.

A message counts as lost when it was never sent (a crash between commit and publish), when the
broker was asked and no longer holds it (`waiting`, read by the caller from the broker's queue
or the local pool's hand-outs), or, when nobody could be asked, when it was sent more than
FOLDWISE_REPUBLISH_AFTER seconds ago. A copy sent twice is harmless: the claim drops it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import timedelta

from sqlalchemy import and_, func, or_, select
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.jobs import lifecycle
from service.jobs.curves.settle import settle_live_curves
from service.jobs.intake.start import start_if_settled
from service.jobs.lifecycle import MAX_ATTEMPTS
from service.store.db import utcnow
from service.store.followup_models import Audit
from service.store.models import Job, WorkUnit
from service.store.statuses import LIVE_JOB, UnitStatus


@dataclass(frozen=True)
class Waiting:
    """Unit ids and audit ids whose message still waits to be taken (read from the broker)."""

    units: set[int] = field(default_factory=set)
    audits: set[str] = field(default_factory=set)


@dataclass(frozen=True)
class Reconciled:
    """What one tick found: units and audits to publish again, jobs moved on, units given up on."""

    republish: list[int]
    advanced: list[str]
    abandoned: list[int]
    audits: list[str] = field(default_factory=list)


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


def _lost(session: Session, settings: Settings, waiting: Waiting | None) -> list[int]:
    now = utcnow()
    live_jobs = select(Job.id).where(Job.status.in_(LIVE_JOB), Job.cancel_requested.is_(False))
    if waiting is None:  # nobody to ask: a message sent long enough ago counts as lost
        stale = now - timedelta(seconds=settings.republish_after)
        sent_and_gone = WorkUnit.published_at < stale
    else:  # sent, and the broker no longer holds it
        sent_and_gone = WorkUnit.published_at.is_not(None)
    found = session.execute(
        select(WorkUnit.id, WorkUnit.status)
        .where(
            WorkUnit.job_id.in_(live_jobs),
            or_(
                and_(
                    WorkUnit.status == UnitStatus.QUEUED,
                    or_(WorkUnit.published_at.is_(None), sent_and_gone),
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
    held = waiting.units if waiting is not None else set()
    # a running unit whose lease lapsed is sent again even if a copy waits: that copy may be
    # the dead holder's own, redelivered only once the broker's visibility timeout passes
    return [
        unit_id for unit_id, status in found if unit_id not in held or status == UnitStatus.RUNNING
    ]


def _lost_audits(session: Session, settings: Settings, waiting: Waiting | None) -> list[str]:
    query = select(Audit.id).where(Audit.status == "queued").order_by(Audit.created_at, Audit.id)
    if waiting is None:
        stale = utcnow() - timedelta(seconds=settings.republish_after)
        query = query.where(or_(Audit.published_at.is_(None), Audit.published_at < stale))
        return list(session.scalars(query))
    return [audit_id for audit_id in session.scalars(query) if audit_id not in waiting.audits]


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


def reconcile(
    sessions: sessionmaker[Session], settings: Settings, waiting: Waiting | None = None
) -> Reconciled:
    """One tick: give up on poison units, move stalled jobs on, list what to publish again.

    `waiting`: the units and audits whose message the broker still holds, read by the caller
    just before; None when the broker cannot be asked.
    """
    with sessions.begin() as session:
        abandoned = _give_up(session)
    with sessions() as session:
        stalled = _stalled(session)
    for job_id in stalled:
        start_if_settled(sessions, job_id, settings)  # marks it running, then advance_job
    settle_live_curves(sessions)  # learning curves whose sizes ended without settling them
    with sessions() as session:
        republish = _lost(session, settings, waiting)
        audits = _lost_audits(session, settings, waiting)
    return Reconciled(republish, stalled, abandoned, audits)
