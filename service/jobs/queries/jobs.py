"""Reading jobs as a principal may: get one, list and filter, a result with other teams' jobs
masked, and a job's fold scores page by page."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import Select, func, select
from sqlalchemy.orm import Session, defer

from service.auth import Action, Principal, authorize, reaches_every_team
from service.errors import not_visible
from service.store.models import Candidate, FoldScore, Job, JobCandidate, JobFold
from service.store.statuses import JobStatus


def get_job(
    session: Session, job_id: str, principal: Principal, action: Action = Action.READ
) -> Job:
    """The job, if the matrix lets the principal do `action` to it (else NotFound, as missing)."""
    job = session.get(Job, job_id)
    if job is None:
        raise not_visible("job", job_id)
    authorize(principal, action, job.team, what="job", ident=job_id)
    return job


OTHER_TEAM = "another team's job"


def result_for(session: Session, principal: Principal, job: Job) -> dict[str, Any] | None:
    """A succeeded job's result as the principal may see it: the jobs that computed its outer
    scores are named only when the principal may read them."""
    if job.status != JobStatus.SUCCEEDED or job.result is None:
        return None
    result = dict(job.result)
    work = result.get("work")
    if not isinstance(work, dict) or not work.get("outer_computed_by"):
        return result
    rows = work["outer_computed_by"]
    hidden = foreign_job_ids(session, principal, {r["job_id"] for r in rows if r.get("job_id")})
    if hidden:
        masked = [
            {**r, "job_id": None, "computed_by": OTHER_TEAM} if r.get("job_id") in hidden else r
            for r in rows
        ]
        result["work"] = {**work, "outer_computed_by": masked}
    return result


def foreign_job_ids(session: Session, principal: Principal, job_ids: set[str]) -> set[str]:
    """Those of `job_ids` that belong to teams the principal may not read (to be left out)."""
    if not job_ids or reaches_every_team(principal, Action.READ):
        return set()
    mine = set(
        session.scalars(select(Job.id).where(Job.id.in_(job_ids), Job.team == principal.team))
    )
    return job_ids - mine


# A listing shows ids, status, times and progress. The request and result documents are the
# bulk of a job row (tens of kB of JSON each); decoding them for a page of 50 jobs took most
# of the listing's time (tests/benchmarks/bench_store_scale.py), so listings leave them unloaded.
SUMMARY_ONLY = (defer(Job.request), defer(Job.result), defer(Job.error))


def job_query(
    principal: Principal,
    *,
    dataset_hash: str | None = None,
    status: str | None = None,
    created_after: datetime | None = None,
    created_before: datetime | None = None,
    estimator: str | None = None,
    schedule_id: str | None = None,
) -> Select[Job]:
    """Jobs the principal may see, filtered, newest first."""
    query = select(Job)
    if not reaches_every_team(principal, Action.READ):
        query = query.where(Job.team == principal.team)
    if dataset_hash:
        query = query.where(Job.dataset_hash == dataset_hash)
    if status:
        query = query.where(Job.status == status)
    if created_after:
        query = query.where(Job.created_at >= created_after)
    if created_before:
        query = query.where(Job.created_at < created_before)
    if estimator:
        # a family appears in a job when any of its candidates is of that estimator class
        families = (
            select(JobCandidate.job_id)
            .join(Candidate, Candidate.candidate_key == JobCandidate.candidate_key)
            .where(Candidate.estimator == estimator)
        )
        query = query.where(Job.id.in_(families))
    if schedule_id:
        query = query.where(Job.schedule_id == schedule_id)
    return query.order_by(Job.created_at.desc(), Job.id.desc())


def list_jobs(
    session: Session, principal: Principal, *, limit: int, offset: int, **filters: Any
) -> tuple[list[Job], int]:
    """A page of jobs and the total count."""
    query = job_query(principal, **filters)
    total = session.scalar(select(func.count()).select_from(query.order_by(None).subquery()))
    jobs = list(session.scalars(query.options(*SUMMARY_ONLY).limit(limit).offset(offset)))
    return jobs, int(total or 0)


def fold_scores_page(
    session: Session, job: Job, *, after_id: int, limit: int, all_metrics: bool = False
) -> list[FoldScore]:
    """The stored scores of the job's candidates on its folds, in id order after `after_id`.

    Only the metrics the job asked for, unless `all_metrics`: another job on the same folds may
    have added metrics this job never requested.
    """
    folds = select(JobFold.fingerprint).where(JobFold.job_id == job.id)
    keys = select(JobCandidate.candidate_key).where(JobCandidate.job_id == job.id)
    query = select(FoldScore).where(
        FoldScore.dataset_hash == job.dataset_hash,
        FoldScore.fold_fingerprint.in_(folds),
        FoldScore.candidate_key.in_(keys),
        FoldScore.id > after_id,
    )
    metrics = list((job.request or {}).get("metrics") or [])
    if metrics and not all_metrics:
        query = query.where(FoldScore.metric.in_(metrics))
    return list(session.scalars(query.order_by(FoldScore.id).limit(limit)))
