"""Fan-in in the database: moving a job to its next stage exactly once, whoever finishes last.

Stages: `inner` (every candidate on every inner fold) → `outer` (each pick refit on its outer
training part, and the final pick on all rows) → `aggregating` → `done`. Each move is a
conditional UPDATE, so of several processes that see the last unit land, one wins.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import CursorResult, insert, update
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.cv.interval_folds import shared_with_outer
from service.cv.nested import refit_units
from service.cv.selection import pick
from service.jobs import lifecycle
from service.jobs.execution.plans import plan_for_job
from service.jobs.execution.result import build_result
from service.jobs.execution.reuse import reuse_stored
from service.jobs.execution.scores import load_book
from service.jobs.intake.create import unit_row
from service.store.models import Job, Pick, WorkUnit
from service.store.statuses import JobStatus


def _elect(session: Session, job_id: str, from_stage: str, to_stage: str) -> bool:
    moved: CursorResult[Any] = session.execute(  # type: ignore[assignment]
        update(Job)
        .where(Job.id == job_id, Job.stage == from_stage, Job.status == JobStatus.RUNNING)
        .values(stage=to_stage)
    )
    return moved.rowcount == 1


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
            picks = {scope: pick(loaded.plan, scope, book) for scope in loaded.plan.scopes}
            lifecycle.succeed_job(session, job, build_result(session, job, loaded, book, picks))
            return []
        if job.stage != "inner" or not _elect(session, job_id, "inner", "outer"):
            return []
        book = load_book(session, loaded)
        picks = {scope: pick(loaded.plan, scope, book) for scope in loaded.plan.scopes}
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
    if ids:
        return ids
    # every refit came from the store: no unit will finish to trigger the last move
    return advance_job(sessions, job_id, settings)
