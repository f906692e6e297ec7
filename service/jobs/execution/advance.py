"""Fan-in in the database: moving a job to its next stage exactly once, whoever finishes last.

Stages: `inner` (every candidate on every inner fold) → `outer` (each pick refit on its outer
training part, and the final pick on all rows) → `aggregating` → `done`. Each move is a
conditional UPDATE, so of several processes that see the last unit land, one wins.

A halving search runs its `inner` stage round by round: when one search's round has no open unit
left, that search's next round (the candidates its race keeps) is added while the other searches
finish theirs (`advance_rounds`); each unit is unique by job, scope, candidate and round, so of
several processes adding them one does and the others add nothing.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import CursorResult, func, insert, select, update
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.cv.halving_race import book_means, pick_for, race
from service.cv.interval_folds import shared_with_outer
from service.cv.nested import refit_units
from service.cv.selection import ScoreBook
from service.jobs import lifecycle
from service.jobs.execution.plans import LoadedPlan, plan_for_job
from service.jobs.execution.result import build_result
from service.jobs.execution.reuse import reuse_stored
from service.jobs.execution.scores import load_book
from service.jobs.intake.create import unit_row
from service.store.db import inserted_keys
from service.store.models import Job, Pick, WorkUnit
from service.store.statuses import JobStatus


def _elect(session: Session, job_id: str, from_stage: str, to_stage: str) -> bool:
    moved: CursorResult[Any] = session.execute(  # type: ignore[assignment]
        update(Job)
        .where(Job.id == job_id, Job.stage == from_stage, Job.status == JobStatus.RUNNING)
        .values(stage=to_stage)
    )
    return moved.rowcount == 1


def _next_round(
    session: Session,
    job: Job,
    loaded: LoadedPlan,
    book: ScoreBook,
    scopes: list[str] | None = None,
) -> list[int] | None:
    """Add the units of each halving search's next round; None when every round has its units.

    The next round is the one after the job's last round of units, not the first unscored
    one: scores another job stored may answer rounds ahead, and each round still gets its
    units (answered from the store), so the job's work and audit trail show every round.
    Returns the ids this call added and left queued (an empty list: another process added
    them, or the store answered them all, so the caller looks again).
    """
    plan = loaded.plan
    means = book_means(plan, book)
    made = dict(
        session.execute(
            select(WorkUnit.scope, func.max(WorkUnit.halving_round))
            .where(WorkUnit.job_id == job.id, WorkUnit.kind == "inner")
            .group_by(WorkUnit.scope)
        ).all()
    )
    rows = []
    for scope in plan.scopes if scopes is None else scopes:
        racers = race(plan, scope, means).racers
        following = made[scope] + 1
        if following < len(racers):
            rows += [unit_row(job.id, "inner", scope, c.key, following) for c in racers[following]]
    if not rows:
        return None
    added = inserted_keys(session, WorkUnit, rows)
    if added and job.request.get("reuse", True) and reuse_stored(session, job.id, loaded):
        return lifecycle.queued_unit_ids(session, job.id)
    return added


def advance_rounds(
    sessions: sessionmaker[Session], job_id: str, scopes: list[str], settings: Settings
) -> list[int]:
    """Add the next round of the halving searches `scopes`, whose rounds ended while other
    searches' rounds still run (a search does not wait for the others); the ids to dispatch."""
    with sessions.begin() as session:
        job = session.get_one(Job, job_id)
        if job.status != JobStatus.RUNNING or job.stage != "inner":
            return []
        loaded = plan_for_job(session, job_id, settings)
        added = _next_round(session, job, loaded, load_book(session, loaded), scopes)
    if added:
        return added
    # those searches are at their last round, or the store answered the new one: if nothing
    # else is open either, nobody else will move the job on
    return advance_job(sessions, job_id, settings)


def advance_job(sessions: sessionmaker[Session], job_id: str, settings: Settings) -> list[int]:
    """Move the job on if its current stage is complete; returns ids of new units to dispatch."""
    with sessions.begin() as session:
        job = session.get_one(Job, job_id)
        # a learning curve's parent has no units: its children settle it (jobs.curves)
        if (
            job.status != JobStatus.RUNNING
            or job.kind != "selection"
            or lifecycle.units_not_done(session, job_id)
        ):
            return []
        loaded = plan_for_job(session, job_id, settings)
        if job.stage == "outer" and _elect(session, job_id, "outer", "aggregating"):
            book = load_book(session, loaded)
            picks = {scope: pick_for(loaded.plan, scope, book) for scope in loaded.plan.scopes}
            lifecycle.succeed_job(session, job, build_result(session, job, loaded, book, picks))
            return []
        if job.stage != "inner":
            return []
        book = load_book(session, loaded)
        added = _next_round(session, job, loaded, book) if loaded.plan.rounds else None
        if added is None:
            ids = _start_refits(session, job, loaded, book)
            if ids is None:
                return []
        else:
            ids = added
    if ids:
        return ids
    # a round or the refits came from the store (or another process added them): look again
    return advance_job(sessions, job_id, settings)


def _start_refits(
    session: Session, job: Job, loaded: LoadedPlan, book: ScoreBook
) -> list[int] | None:
    """Elect the move from `inner` to `outer`, store the picks and add the refit units; the
    ids left queued, or None when another process made the move."""
    job_id = job.id
    if not _elect(session, job_id, "inner", "outer"):
        return None
    picks = {scope: pick_for(loaded.plan, scope, book) for scope in loaded.plan.scopes}
    session.add_all(
        Pick(
            job_id=job_id,
            outer_repeat=fold.repeat,
            outer_fold=fold.index,
            candidate_key=picks[fold.scope].candidate.key,
            inner_mean=picks[fold.scope].inner_mean,
        )
        for fold in loaded.plan.outer
    )
    shared = shared_with_outer(loaded.plan.outer, loaded.plan.interval_folds)
    rows = [
        unit_row(job_id, r.kind, r.scope, r.candidate_key)
        for r in refit_units(picks)
        if r.scope not in shared  # the job's own outer refit serves it (interval_folds)
    ]
    ids = list(session.scalars(insert(WorkUnit).returning(WorkUnit.id), rows))
    if job.request.get("reuse", True) and reuse_stored(session, job_id, loaded):
        ids = lifecycle.queued_unit_ids(session, job_id)
    return ids
