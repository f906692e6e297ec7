"""Application services over jobs: submit with an idempotency key, get, list, scores.

Callers own the session and its transaction; nothing here publishes to a broker (the API does
that after its commit, from the committed rows).
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any

from sqlalchemy import Select, func, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from service.auth import Action, Principal, authorize, reaches_every_team
from service.config import Settings
from service.datasets.sources import check_table_size
from service.errors import NotFound as NotFound  # re-exported: callers catch it from here
from service.errors import not_visible
from service.jobs.curves import create_submission, prepare_submission
from service.json_values import check_json_values
from service.notify.targets import check_webhook_target
from service.store.models import (
    Candidate,
    DatasetRegistration,
    FoldScore,
    Job,
    JobCandidate,
    JobFold,
)
from service.store.statuses import JobStatus


class Conflict(Exception):
    """The request clashes with stored state (an idempotency key reused with another body)."""


def request_hash(data: Any) -> str:
    """sha256 of a request body in canonical JSON."""
    text = json.dumps(data, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode()).hexdigest()


@dataclass(frozen=True)
class Submitted:
    """The job a submission names, and whether this call created it."""

    job: Job
    created: bool


def submit_job(
    session: Session,
    data: Any,
    *,
    principal: Principal,
    settings: Settings,
    idempotency_key: str | None = None,
    base_dir: Path | None = None,
) -> Submitted:
    """Validate and store a job for the principal's team (BadInput leaves nothing behind)."""
    authorize(principal, Action.SUBMIT)
    check_json_values(data)  # NaN or Infinity is the caller's to fix, not a hashing crash
    body_hash = request_hash(data)
    if idempotency_key is not None:
        # keys are the team's own: another team's use of the same key is none of its business
        earlier = session.scalars(
            select(Job).where(Job.team == principal.team, Job.idempotency_key == idempotency_key)
        ).one_or_none()
        if earlier is not None:
            if earlier.request_hash != body_hash:
                raise Conflict(
                    "this Idempotency-Key was used with a different request; use a new key."
                )
            return Submitted(earlier, False)
    if isinstance(data, dict) and isinstance(data.get("dataset"), str):
        # an analyst reads other teams' tables but may not copy one into its own team's jobs
        visible_dataset(session, data["dataset"], principal, Action.SUBMIT)
    prepared = prepare_submission(
        data,
        session=session,
        settings=settings,
        base_dir=base_dir or settings.home,
        team=principal.team,
    )
    webhook = None
    if prepared.request.webhook is not None:  # kept as it will be sent: parsed and normalised
        webhook = check_webhook_target(prepared.request.webhook, settings, field="webhook")
    # the caps hold for every table a service caller names, not only for uploads
    check_table_size(
        prepared.table.frame,
        max_rows=settings.max_rows,
        max_columns=settings.max_columns,
        field="dataset",
    )
    job_id = create_submission(
        session, prepared, settings, idempotency_key=idempotency_key, team=principal.team
    )
    job = session.get_one(Job, job_id)
    job.team, job.request_hash = principal.team, body_hash
    job.webhook_url = webhook
    register_dataset(
        session, prepared.table.content_hash, principal.team, origin=prepared.table.origin
    )
    session.flush()
    return Submitted(job, True)


def submit_committed(
    session: Session,
    data: Any,
    *,
    principal: Principal,
    settings: Settings,
    idempotency_key: str | None = None,
    base_dir: Path | None = None,
) -> Submitted:
    """`submit_job`, committed; a race of two new submissions under one key answers the winner's.

    The caller starts a created job after this commit (start.start_submitted).
    """

    def submit() -> Submitted:
        return submit_job(
            session,
            data,
            principal=principal,
            settings=settings,
            idempotency_key=idempotency_key,
            base_dir=base_dir,
        )

    try:
        submitted = submit()
        session.commit()
    except IntegrityError:
        # the loser of the race on the (team, key) unique constraint finds the winner's job
        session.rollback()
        if idempotency_key is None:
            raise
        submitted = submit()
        session.commit()
    return submitted


def register_dataset(
    session: Session, content_hash: str, team: str, *, origin: dict[str, str] | None = None
) -> None:
    """Let `team` see a stored table (idempotent), remembering where its copy came from."""
    if session.get(DatasetRegistration, (team, content_hash)) is None:
        session.add(
            DatasetRegistration(
                team=team, content_hash=content_hash, origin=dict(origin) if origin else None
            )
        )


def visible_dataset(
    session: Session, content_hash: str, principal: Principal, action: Action = Action.READ
) -> None:
    """Raise NotFound unless the matrix lets the principal act on the table."""
    query = select(DatasetRegistration.team).where(DatasetRegistration.content_hash == content_hash)
    teams = set(session.scalars(query))
    if not teams:
        raise not_visible("dataset", content_hash)
    authorize(principal, action, teams, what="dataset", ident=content_hash)


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
    jobs = list(session.scalars(query.limit(limit).offset(offset)))
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
