"""What analysts ask of the store: a dataset's jobs, its fold scores across jobs, two jobs compared.

Callers own the session. Visibility follows the job services: a token sees its own team's jobs
and datasets, an analyst token every team's; what a caller may not see is reported as not found.
"""

from __future__ import annotations

from typing import Literal

from sqlalchemy import Select, func, select, tuple_
from sqlalchemy.orm import Session

from service.analysis.compare import Comparison, compare_outer_scores, outer_scores_from_result
from service.auth import Action, Principal, reaches_every_team
from service.cv.scopes import INTERVAL_REPEAT_BASE
from service.errors import BadInput, NotFound
from service.jobs.handover.fold_rows import reader_role_filter
from service.jobs.queries.datasets import visible_dataset
from service.jobs.queries.jobs import SUMMARY_ONLY, get_job, job_query
from service.store.models import FoldScore, Job, JobCandidate, JobFold
from service.store.statuses import JobStatus

# the roles a reader sees (service/jobs/handover/fold_rows.py READER_ROLES)
FoldRole = Literal[
    "outer",
    "inner",
    "final_inner",
    "interval_outer",
    "interval_inner",
    "halving_inner",
    "halving_final_inner",
]
MAX_PAGE = 1000


def dataset_jobs(
    session: Session, principal: Principal, content_hash: str, *, limit: int, offset: int
) -> tuple[list[Job], int]:
    """The visible jobs on one dataset, newest first, and their count (NotFound if not visible)."""
    visible_dataset(session, content_hash, principal)
    query = job_query(principal, dataset_hash=content_hash)
    total = session.scalar(select(func.count()).select_from(query.order_by(None).subquery()))
    page = query.options(*SUMMARY_ONLY).limit(limit).offset(offset)
    return list(session.scalars(page)), int(total or 0)


def dataset_fold_score_query(
    principal: Principal,
    content_hash: str,
    *,
    candidate_key: str | None = None,
    metric: str | None = None,
    role: FoldRole | None = None,
) -> Select[FoldScore]:
    """Every stored score of the dataset that some visible job's plan holds, in id order."""
    jobs = select(Job.id).where(Job.dataset_hash == content_hash)
    if not reaches_every_team(principal, Action.READ):
        jobs = jobs.where(Job.team == principal.team)
    # A score belongs to a job's plan when the job has both its fold and its candidate; the
    # score may have been computed by another job (reuse), so job_id alone would miss it. The
    # role comes from job_fold too: one fold can be outer in one job and final inner in another.
    # Written as one uncorrelated (fold, candidate) set so the database builds it once per page
    # (a hashed subplan) instead of probing it row by row.
    in_plan = (
        select(JobFold.fingerprint, JobCandidate.candidate_key)
        .join(JobCandidate, JobCandidate.job_id == JobFold.job_id)
        .where(JobFold.job_id.in_(jobs))
    )
    if role is not None:
        # a nested interval's procedure folds are stored as outer (and inner) folds, a halving
        # search's round folds as inner (and final inner) folds: the reader's role tells them
        # apart, so role=outer is the job's own outer folds only and role=inner plain inner folds
        in_plan = in_plan.where(reader_role_filter(role))
    query = select(FoldScore).where(
        FoldScore.dataset_hash == content_hash,
        tuple_(FoldScore.fold_fingerprint, FoldScore.candidate_key).in_(in_plan),
    )
    if candidate_key is not None:
        query = query.where(FoldScore.candidate_key == candidate_key)
    if metric is not None:
        query = query.where(FoldScore.metric == metric)
    return query.order_by(FoldScore.id)


def dataset_fold_scores_page(
    session: Session,
    principal: Principal,
    content_hash: str,
    *,
    after_id: int = 0,
    limit: int = 100,
    candidate_key: str | None = None,
    metric: str | None = None,
    role: FoldRole | None = None,
) -> list[FoldScore]:
    """One keyset page (id > after_id) of the dataset's fold scores across visible jobs."""
    if not 1 <= limit <= MAX_PAGE:
        raise BadInput("limit", f"must be between 1 and {MAX_PAGE}.")
    query = dataset_fold_score_query(
        principal, content_hash, candidate_key=candidate_key, metric=metric, role=role
    )
    return list(session.scalars(query.where(FoldScore.id > after_id).limit(limit)))


def outer_fingerprints(session: Session, job_id: str) -> list[str]:
    """The job's outer fold fingerprints in (repeat, fold) order, as result v1 lists them."""
    return list(
        session.scalars(
            select(JobFold.fingerprint)
            .where(
                JobFold.job_id == job_id,
                JobFold.role == "outer",
                # not a nested interval's procedure folds: the estimate does not average them
                JobFold.repeat < INTERVAL_REPEAT_BASE,
            )
            .order_by(JobFold.repeat, JobFold.fold_index)
        )
    )


def _comparable(session: Session, principal: Principal, job_id: str) -> Job:
    try:
        job = get_job(session, job_id, principal)
    except NotFound:
        raise BadInput("jobs", f"no job {job_id!r} is visible to your token.") from None
    if job.status != JobStatus.SUCCEEDED or job.result is None:
        raise BadInput(
            "jobs", f"job {job_id!r} is {job.status}; only succeeded jobs can be compared."
        )
    if job.kind != "selection" or "outer" not in job.result:
        # a learning curve's parent holds sizes, not outer folds; its children are selections
        raise BadInput("jobs", f"job {job_id!r} is a {job.kind} job; compare two selection jobs.")
    return job


def compare_jobs(session: Session, principal: Principal, left_id: str, right_id: str) -> Comparison:
    """Compare two visible, succeeded jobs on the same dataset (BadInput on field `jobs` if not)."""
    left = _comparable(session, principal, left_id)
    right = _comparable(session, principal, right_id)
    if left.dataset_hash != right.dataset_hash:
        raise BadInput(
            "jobs",
            "the two jobs ran on different datasets; compare jobs on the same content hash.",
        )
    assert left.result is not None and right.result is not None
    shared = set(left.result["metrics"]) & set(right.result["metrics"])
    if not shared:
        raise BadInput("jobs", "the two jobs share no metric; compare jobs scored alike.")
    return compare_outer_scores(
        outer_scores_from_result(left.id, left.result, outer_fingerprints(session, left.id)),
        outer_scores_from_result(right.id, right.result, outer_fingerprints(session, right.id)),
    )
