"""Result v1 of a finished job, assembled from what the store holds."""

from __future__ import annotations

import platform
from typing import Any

import numpy as np
import sklearn
from sqlalchemy import func, select
from sqlalchemy.orm import Session

import service
from service.cv.cautions import find_cautions
from service.cv.halving_race import book_means, race, search_section
from service.cv.intervals import attach_intervals
from service.cv.selection import Pick as EnginePick
from service.cv.selection import ScoreBook, assemble
from service.cv.slices import slice_estimates
from service.jobs.execution.interval_work import nested_from_store, work_by_purpose
from service.jobs.execution.plans import LoadedPlan
from service.jobs.handover.outer_predictions import NotReady, all_outer
from service.store.db import utcnow
from service.store.models import FinalModel, FoldScore, Job, WorkUnit
from service.store.statuses import UnitStatus


def versions() -> dict[str, str]:
    """The versions a result was made with."""
    return {
        "foldwise": service.__version__,
        "scikit-learn": sklearn.__version__,
        "numpy": np.__version__,
        "python": platform.python_version(),
    }


def work_summary(session: Session, job: Job) -> dict[str, Any]:
    """How much work the job took: units, fits and wall seconds since submission."""
    done, reused, fits = session.execute(
        select(
            func.count(),
            func.count().filter(WorkUnit.reused.is_(True)),
            func.coalesce(func.sum(WorkUnit.fits), 0),
        ).where(WorkUnit.job_id == job.id, WorkUnit.status == UnitStatus.DONE)
    ).one()
    seconds = (utcnow() - job.created_at).total_seconds()
    return {
        "units_total": job.units_total,
        "units_computed": int(done) - int(reused),
        "units_reused": int(reused),
        "fits": int(fits),
        "seconds": round(seconds, 3),
    }


def computing_jobs(
    session: Session, loaded: LoadedPlan, result: dict[str, Any]
) -> list[dict[str, Any]]:
    """For each outer row, in its order, the job that computed its scores (earlier if reused).

    Kept under `work` rather than in the outer rows: those rows are the estimate, equal for
    equal requests whichever store or job computed them.
    """
    fingerprints = {(f.repeat, f.index): f.fingerprint for f in loaded.plan.outer}
    rows = []
    for row in result["outer"]:
        fingerprint = fingerprints[(row["repeat"], row["fold"])]
        job_id = session.scalar(
            select(FoldScore.job_id).where(
                FoldScore.dataset_hash == loaded.dataset_hash,
                FoldScore.fold_fingerprint == fingerprint,
                FoldScore.candidate_key == row["pick"]["candidate_key"],
                FoldScore.metric == result["pick_by"],
            )
        )
        rows.append({"repeat": row["repeat"], "fold": row["fold"], "job_id": job_id})
    return rows


def build_result(
    session: Session, job: Job, loaded: LoadedPlan, book: ScoreBook, picks: dict[str, EnginePick]
) -> dict[str, Any]:
    """Result v1: the engine's aggregation plus dataset hash, model hash, work and versions."""
    result: dict[str, Any] = {"dataset_hash": loaded.dataset_hash}
    result |= assemble(loaded.plan, book, picks)
    model = session.get_one(FinalModel, job.id)
    result["final_pick"]["model_sha256"] = model.sha256
    result["work"] = work_summary(session, job)
    result["work"]["outer_computed_by"] = computing_jobs(session, loaded, result)
    result["versions"] = versions()
    result["cautions"] = find_cautions(loaded.plan, loaded.frame, loaded.kinds)
    result["work"]["by_purpose"] = work_by_purpose(session, job, loaded)
    nested = None
    if loaded.plan.spec.interval.method == "nested":  # from the procedure folds' predictions
        nested, unserved = nested_from_store(session, loaded, picks)
        result["cautions"] += unserved
    result["cautions"] += attach_intervals(loaded.plan.spec, result, nested)
    # every candidate evaluated, drawn range values as drawn, in the order that breaks ties
    result["candidates"] = [c.public() for c in loaded.plan.candidates]
    if loaded.plan.rounds:  # the races replayed from the stored scores that ran them
        means = book_means(loaded.plan, book)
        rounds = [row for s in loaded.plan.scopes for row in race(loaded.plan, s, means).rounds]
        result["search"] = search_section(loaded.plan, rounds, refits=len(loaded.plan.scopes))
    spec = loaded.plan.spec
    if spec.slices:
        try:
            outer = all_outer(session, loaded, result)
        except NotReady as exc:  # predictions of an old reused fold are missing: say so
            result["cautions"].append(f"No estimates per slice: {exc}")
        else:
            result["slices"] = slice_estimates(
                spec.slices, loaded.frame, loaded.plan.y, outer, spec.metrics, spec.pick_metric
            )
    return result
