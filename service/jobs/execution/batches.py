"""Grouping queued units into batches before they are published (service/cv/unit_batches.py).

Read from the store in a few queries for all the ids at once: each unit's candidate (family and
hyperparameters), its job's table size and fold counts, and the mean stored fit time of each
candidate on that table, which, once a table has been fitted on, replaces the family's guess.
"""

from __future__ import annotations

from collections import defaultdict

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.cv.unit_batches import MODEL_HANDOVER_SECONDS, SPREAD, UnitWork, batch_units
from service.store.models import Candidate, Dataset, FoldScore, Job, JobFold, WorkUnit


def _fold_counts(session: Session, job_ids: list[str]) -> dict[str, dict[str, int]]:
    """Per job: outer folds, and inner folds per scope (the final scope's count stands for all)."""
    counts: dict[str, dict[str, int]] = defaultdict(dict)
    rows = session.execute(
        select(JobFold.job_id, JobFold.role, func.count())
        .where(JobFold.job_id.in_(job_ids), JobFold.role.in_(("outer", "final_inner")))
        .group_by(JobFold.job_id, JobFold.role)
    )
    for job_id, role, count in rows:
        counts[job_id][role] = int(count)
    return counts


def _stored_fit_seconds(session: Session, dataset_hash: str, keys: list[str]) -> dict[str, float]:
    """Mean fit seconds per candidate already stored for this table (any job, any fold)."""
    rows = session.execute(
        select(FoldScore.candidate_key, func.avg(FoldScore.fit_seconds))
        .where(FoldScore.dataset_hash == dataset_hash, FoldScore.candidate_key.in_(keys))
        .group_by(FoldScore.candidate_key)
    )
    return {key: float(seconds) for key, seconds in rows if seconds is not None}


def batch_unit_ids(
    session: Session, unit_ids: list[int], *, spread: int = SPREAD
) -> list[list[int]]:
    """`unit_ids` as batches, each within one job; ids the store no longer knows go alone.

    `spread`: how many workers the batches are for (`batch_units`; 1 for one process)."""
    if not unit_ids:
        return []
    rows = session.execute(
        select(
            WorkUnit.id,
            WorkUnit.job_id,
            WorkUnit.kind,
            WorkUnit.candidate_key,
            Candidate.estimator,
            Candidate.params,
            Job.dataset_hash,
            Dataset.n_rows,
        )
        .join(Candidate, Candidate.candidate_key == WorkUnit.candidate_key)
        .join(Job, Job.id == WorkUnit.job_id)
        .join(Dataset, Dataset.content_hash == Job.dataset_hash)
        .where(WorkUnit.id.in_(unit_ids))
        .order_by(WorkUnit.id)
    ).all()
    by_job: dict[str, list[UnitWork]] = defaultdict(list)
    tables: dict[str, tuple[str, int]] = {}
    folds = _fold_counts(session, sorted({row.job_id for row in rows}))
    for row in rows:
        tables[row.job_id] = (row.dataset_hash, row.n_rows)
        outer_k = max(2, folds[row.job_id].get("outer", 5))
        inner_k = max(2, folds[row.job_id].get("final_inner", 3))
        outer_train = int(row.n_rows * (1 - 1 / outer_k))
        extra = 0.0
        if row.kind == "inner":
            fits, rows_each = inner_k, int(outer_train * (1 - 1 / inner_k))
        elif row.kind == "outer_refit":
            fits, rows_each = 1, outer_train
        else:
            fits, rows_each = 1, row.n_rows
            extra = MODEL_HANDOVER_SECONDS if row.kind == "final_refit" else 0.0
        by_job[row.job_id].append(
            UnitWork(row.id, row.candidate_key, row.estimator, row.params, fits, rows_each, extra)
        )
    batches: list[list[int]] = []
    for job_id, works in by_job.items():
        dataset_hash, _ = tables[job_id]
        stored = _stored_fit_seconds(
            session, dataset_hash, sorted({w.candidate_key for w in works})
        )
        batches += batch_units(works, stored, spread=spread)
    known = {row.id for row in rows}
    batches += [[unit_id] for unit_id in unit_ids if unit_id not in known]
    return batches
