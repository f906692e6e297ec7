"""What the report pages read from the store: aggregates in SQL, never one query per score."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.cv.scopes import INTERVAL_REPEAT_BASE, round_repeat
from service.jobs.handover.fold_rows import reader_role_column
from service.store.models import Candidate, FoldScore, Job, JobCandidate, JobFold

INNER_ROLES = ("inner", "final_inner")


@dataclass(frozen=True)
class CandidateRow:
    """A job's candidate in request order."""

    position: int
    key: str
    estimator: str
    params: dict[str, Any]


@dataclass(frozen=True)
class InnerCell:
    """One candidate's inner scores in one scope (an outer fold's training part, or all rows)."""

    scope: str
    candidate_key: str
    n: int
    total: float


def job_candidates(session: Session, job_id: str) -> list[CandidateRow]:
    """The job's candidates in request order, with estimator and hyperparameters."""
    rows = session.execute(
        select(
            JobCandidate.position, Candidate.candidate_key, Candidate.estimator, Candidate.params
        )
        .join(Candidate, Candidate.candidate_key == JobCandidate.candidate_key)
        .where(JobCandidate.job_id == job_id)
        .order_by(JobCandidate.position)
    )
    return [CandidateRow(int(p), k, e, dict(params)) for p, k, e, params in rows]


def inner_cells(session: Session, job: Job, metric: str) -> list[InnerCell]:
    """Count and sum of the stored inner scores per (scope, candidate), for one metric."""
    # Scores are keyed by dataset, fold and candidate, not by job (a later job may reuse them),
    # so the job's folds and candidates select them; GROUP BY keeps this one round trip.
    keys = select(JobCandidate.candidate_key).where(JobCandidate.job_id == job.id)
    query = (
        select(
            JobFold.scope,
            FoldScore.candidate_key,
            func.count(FoldScore.id),
            func.sum(FoldScore.value),
        )
        .join(
            FoldScore,
            (FoldScore.fold_fingerprint == JobFold.fingerprint)
            & (FoldScore.dataset_hash == job.dataset_hash),
        )
        .where(
            JobFold.job_id == job.id,
            JobFold.role.in_(INNER_ROLES),
            # not the inner folds of a nested interval's procedures: the page draws the job's
            # own searches (service/cv/interval_folds.py)
            JobFold.parent_repeat.is_(None) | (JobFold.parent_repeat < INTERVAL_REPEAT_BASE),
            # a halving search: its first round only, where every candidate races on the same
            # rows (later rounds fit fewer candidates on more rows: pooling them would mix the
            # two); a plain inner fold's repeat is below, and the full grid has no rounds
            JobFold.repeat < round_repeat(1, 0),
            FoldScore.metric == metric,
            FoldScore.candidate_key.in_(keys),
        )
        .group_by(JobFold.scope, FoldScore.candidate_key)
    )
    return [InnerCell(s, k, int(n), float(t)) for s, k, n, t in session.execute(query)]


def stored_score_counts(session: Session, job: Job) -> dict[str, int]:
    """How many scores the store holds for the job, per fold role as readers see it (all
    metrics): a nested interval's procedures under interval_outer / interval_inner."""
    keys = select(JobCandidate.candidate_key).where(JobCandidate.job_id == job.id)
    role = reader_role_column()
    query = (
        select(role, func.count(FoldScore.id))
        .join(
            FoldScore,
            (FoldScore.fold_fingerprint == JobFold.fingerprint)
            & (FoldScore.dataset_hash == job.dataset_hash),
        )
        .where(JobFold.job_id == job.id, FoldScore.candidate_key.in_(keys))
        .group_by(role)
    )
    return {name: int(n) for name, n in session.execute(query)}
