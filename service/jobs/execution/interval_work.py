"""A stored job's `nested` interval at fan-in, and its work split by purpose.

The procedure folds' refit units stored their predictions on each fold's test part
(execute._record); the interval is computed from those, whichever job stored them (a fold
fingerprint and a candidate key fix the predictions), by the same function the engine alone uses
(service/cv/nested_interval_units.py).
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import select, tuple_
from sqlalchemy.orm import Session

from service.cv.interval_folds import shared_with_outer
from service.cv.nested_interval_units import MissingPredictions, PredictionBook, nested_entries
from service.cv.predictions import StoredPredictions
from service.cv.scopes import FINAL_SCOPE, is_interval_repeat
from service.cv.selection import Pick
from service.jobs.execution.plans import LoadedPlan
from service.store.models import FoldPrediction, Job, WorkUnit
from service.store.statuses import UnitStatus


def _procedure_predictions(
    session: Session, loaded: LoadedPlan, picks: dict[str, Pick]
) -> PredictionBook:
    plan = loaded.plan
    wanted = {(f.fingerprint, picks[f.scope].candidate.key) for f in plan.interval_folds}
    book: dict[tuple[str, str], StoredPredictions] = {}
    pairs = sorted(wanted)
    for start in range(0, len(pairs), 500):  # IN lists of a bounded length on both stores
        rows = session.scalars(
            select(FoldPrediction).where(
                FoldPrediction.dataset_hash == loaded.dataset_hash,
                tuple_(FoldPrediction.fold_fingerprint, FoldPrediction.candidate_key).in_(
                    pairs[start : start + 500]
                ),
            )
        )
        for row in rows:
            key = (row.fold_fingerprint, row.candidate_key)
            book[key] = StoredPredictions.decode(row.data, plan.spec.task, row.classes)
    return book


def nested_from_store(
    session: Session, loaded: LoadedPlan, picks: dict[str, Pick]
) -> tuple[dict[str, dict[str, Any] | None], list[str]]:
    """Each metric's nested interval entry from the stored predictions, and cautions."""
    book = _procedure_predictions(session, loaded, picks)
    try:
        return nested_entries(loaded.plan, picks, book), []
    except MissingPredictions as exc:
        entries: dict[str, dict[str, Any] | None] = dict.fromkeys(loaded.plan.spec.metrics)
        return entries, [
            f"No nested interval: {exc} (its score was reused from a job that kept none); "
            "submit again with reuse false to refit it."
        ]


def work_by_purpose(session: Session, job: Job, loaded: LoadedPlan) -> dict[str, Any]:
    """Units and fits for the estimate and for the interval, computed and reused.

    A reused unit made no fit here; `fits_reused` counts the fits it would have made, so a
    request that differs only in `interval` shows every fit of its estimate reused. The
    interval's `fits_shared` are those of its procedures that are the job's own outer folds,
    made (and counted) for the estimate.
    """
    plan = loaded.plan
    purposes = {
        name: {"units": 0, "units_reused": 0, "fits": 0, "fits_reused": 0}
        for name in ("estimate", "interval")
    }
    units = session.execute(
        select(
            WorkUnit.kind, WorkUnit.scope, WorkUnit.outer_repeat, WorkUnit.reused, WorkUnit.fits
        ).where(WorkUnit.job_id == job.id, WorkUnit.status == UnitStatus.DONE)
    )
    shared = shared_with_outer(plan.outer, plan.interval_folds)
    per_search = len(plan.inner[FINAL_SCOPE]) * len(plan.candidates) + 1
    purposes["interval"]["fits_shared"] = len(shared) * per_search
    for kind, scope, repeat, reused, fits in units:
        counts = purposes["interval" if is_interval_repeat(repeat) else "estimate"]
        counts["units"] += 1
        if reused:
            counts["units_reused"] += 1
            counts["fits_reused"] += len(plan.inner[scope]) if kind == "inner" else 1
        else:
            counts["fits"] += int(fits)
    return purposes
