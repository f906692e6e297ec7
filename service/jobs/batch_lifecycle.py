"""Status moves of a batch of units claimed together (service/cv/unit_batches.py).

The same rules as `lifecycle`'s one-unit moves (claim_unit, renew_lease, unit_done), one
statement each for every unit of the batch: a batch claim gives all its units one token, and
every later write is fenced on it unit by unit, so a unit taken over by another copy is left out
of this copy's record while the units it still holds are recorded. `lifecycle` stays the one
place a job's status moves; this module only moves units, and counts them on their job.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass
from datetime import timedelta
from typing import Any

from sqlalchemy import CursorResult, case, select, update
from sqlalchemy.orm import Session

from service.jobs.lifecycle import claim_statement, start_job, units_not_done
from service.store.db import utcnow
from service.store.models import Job, WorkUnit
from service.store.statuses import OPEN_UNIT, UnitStatus


@dataclass(frozen=True)
class ClaimedUnit:
    """A unit a batch claim took: what running it needs, read by the claim itself."""

    id: int
    job_id: str
    kind: str
    scope: str
    candidate_key: str
    halving_round: int


def claim_units(
    session: Session, unit_ids: list[int], worker: str, lease: timedelta
) -> tuple[str, list[ClaimedUnit]]:
    """`claim_unit` for a batch in one statement: one token for every unit it could take.

    The units it leaves out are duplicates (done, failed, running under a live lease, or of a
    stopped job), exactly as claim_unit would refuse them one by one. Their jobs start too.
    """
    token = uuid.uuid4().hex
    claimed = session.execute(
        claim_statement(unit_ids, worker, lease, token).returning(
            WorkUnit.id,
            WorkUnit.job_id,
            WorkUnit.kind,
            WorkUnit.scope,
            WorkUnit.candidate_key,
            WorkUnit.halving_round,
        )
    ).all()
    units = sorted((ClaimedUnit(*row) for row in claimed), key=lambda unit: unit_ids.index(unit.id))
    for job_id in dict.fromkeys(unit.job_id for unit in units):
        start_job(session, job_id)
    return token, units


def renew_leases(session: Session, unit_ids: list[int], token: str, lease: timedelta) -> int:
    """`renew_lease` for a batch's claim: the leases of its running units move on; returns how
    many of its units are still this claim's (running, or already ended by it)."""
    # a unit this claim has already recorded keeps the token: counting it keeps a renewal that
    # races the batch's record from reading its own ended units as taken over
    renewed: CursorResult[Any] = session.execute(  # type: ignore[assignment]
        update(WorkUnit)
        .where(WorkUnit.id.in_(unit_ids), WorkUnit.claim_token == token)
        .values(
            lease_until=case(
                (WorkUnit.status == UnitStatus.RUNNING, utcnow() + lease),
                else_=WorkUnit.lease_until,
            )
        )
    )
    return int(renewed.rowcount)


def scopes_without_open_units(session: Session, job_id: str, scopes: list[str]) -> list[str]:
    """Those of `scopes` in which no inner unit of the job is queued or running."""
    if not scopes:
        return []
    open_scopes = set(
        session.scalars(
            select(WorkUnit.scope)
            .where(
                WorkUnit.job_id == job_id,
                WorkUnit.kind == "inner",
                WorkUnit.scope.in_(scopes),
                WorkUnit.status.in_(OPEN_UNIT),
            )
            .distinct()
        )
    )
    return [scope for scope in scopes if scope not in open_scopes]


def units_done(
    session: Session, job_id: str, token: str, ran: dict[int, tuple[int, float]]
) -> tuple[list[int], bool]:
    """`unit_done` for the units of one job a batch claim ran (`ran`: id -> fits, seconds).

    Returns the ids this claim still held, now done and counted (only their scores may be
    written), and True when no unit of the job is left open.
    """
    if not ran:
        return [], units_not_done(session, job_id) == 0
    done = list(
        session.scalars(
            update(WorkUnit)
            .where(
                WorkUnit.id.in_(list(ran)),
                WorkUnit.claim_token == token,
                WorkUnit.status == UnitStatus.RUNNING,
            )
            .values(
                status=UnitStatus.DONE,
                finished_at=utcnow(),
                fits=case({i: fits for i, (fits, _) in ran.items()}, value=WorkUnit.id),
                seconds=case({i: sec for i, (_, sec) in ran.items()}, value=WorkUnit.id),
            )
            .returning(WorkUnit.id)
        )
    )
    if done:
        session.execute(
            update(Job).where(Job.id == job_id).values(units_done=Job.units_done + len(done))
        )
    return done, units_not_done(session, job_id) == 0
