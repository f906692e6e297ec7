"""A job's fold scores read back from the store, keyed as the engine keys them."""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.cv.selection import ScoreBook
from service.jobs.execution.plans import LoadedPlan, fold_fingerprints
from service.store.models import FoldScore


def load_book(session: Session, loaded: LoadedPlan) -> ScoreBook:
    """Every stored score of this plan's folds and candidates, whichever job computed it."""
    plan = loaded.plan
    keys = [c.key for c in plan.candidates]
    rows = session.execute(
        select(
            FoldScore.fold_fingerprint, FoldScore.candidate_key, FoldScore.metric, FoldScore.value
        ).where(
            FoldScore.dataset_hash == loaded.dataset_hash,
            FoldScore.fold_fingerprint.in_(sorted(fold_fingerprints(plan))),
            FoldScore.candidate_key.in_(keys),
            FoldScore.metric.in_(plan.spec.metrics),
        )
    )
    return {(fp, key, metric): float(value) for fp, key, metric, value in rows}
