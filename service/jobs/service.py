"""Application services over jobs: submit with an idempotency key, get, list, cancel, scores.

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

from sqlalchemy import Select, func, select, update
from sqlalchemy.orm import Session

from service.auth import Principal
from service.config import Settings
from service.datasets.sources import check_table_size
from service.jobs.curves import create_submission, prepare_submission
from service.json_values import check_json_values
from service.notify.outbox import queue_job_notice
from service.notify.targets import check_webhook_target
from service.store.db import utcnow
from service.store.models import (
    Candidate,
    DatasetRegistration,
    FoldScore,
    Job,
    JobCandidate,
    JobFold,
    WorkUnit,
)


class Conflict(Exception):
    """The request clashes with stored state (an idempotency key reused with another body)."""


class NotFound(LookupError):
    """No such object, or not one the caller may see (the two are not told apart)."""


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
    check_json_values(data)  # NaN or Infinity is the caller's to fix, not a hashing crash
    body_hash = request_hash(data)
    if idempotency_key is not None:
        earlier = session.scalars(
            select(Job).where(Job.idempotency_key == idempotency_key)
        ).one_or_none()
        if earlier is not None:
            if earlier.request_hash != body_hash or earlier.team != principal.team:
                raise Conflict(
                    "this Idempotency-Key was used with a different request; use a new key."
                )
            return Submitted(earlier, False)
    if isinstance(data, dict) and isinstance(data.get("dataset"), str):
        visible_dataset(session, data["dataset"], principal)
    prepared = prepare_submission(
        data, session=session, settings=settings, base_dir=base_dir or settings.home
    )
    if prepared.request.webhook is not None:
        check_webhook_target(prepared.request.webhook, settings, field="webhook")
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
    job.webhook_url = prepared.request.webhook
    register_dataset(session, prepared.table.content_hash, principal.team)
    session.flush()
    return Submitted(job, True)


def register_dataset(session: Session, content_hash: str, team: str) -> None:
    """Let `team` see a stored table (idempotent)."""
    if session.get(DatasetRegistration, (team, content_hash)) is None:
        session.add(DatasetRegistration(team=team, content_hash=content_hash))


def visible_dataset(session: Session, content_hash: str, principal: Principal) -> None:
    """Raise NotFound unless the principal's team registered the table (or is an analyst)."""
    query = select(DatasetRegistration.team).where(DatasetRegistration.content_hash == content_hash)
    teams = set(session.scalars(query))
    if not teams or not (principal.analyst or principal.team in teams):
        raise NotFound(f"no dataset {content_hash!r} is visible to team {principal.team!r}")


def get_job(session: Session, job_id: str, principal: Principal) -> Job:
    """The job, if the principal may see it."""
    job = session.get(Job, job_id)
    if job is None or not principal.may_see(job.team):
        raise NotFound(f"no job {job_id!r}")
    return job


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
    if not principal.analyst:
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


def cancel_job(session: Session, job: Job) -> Job:
    """Flag a queued or running job cancelled; units stop between fits."""
    if job.status in ("queued", "running"):
        job.cancel_requested, job.status, job.finished_at = True, "cancelled", utcnow()
        queue_job_notice(session, job.id)
        session.execute(
            update(WorkUnit)
            .where(WorkUnit.job_id == job.id, WorkUnit.status == "queued")
            .values(status="cancelled")
        )
        for child in session.scalars(select(Job).where(Job.parent_id == job.id)).all():
            cancel_job(session, child)  # a learning curve's selections stop with it
    return job


def queued_unit_ids(session: Session, job_id: str) -> list[int]:
    """The job's units still waiting to be published or run."""
    return list(
        session.scalars(
            select(WorkUnit.id)
            .where(WorkUnit.job_id == job_id, WorkUnit.status == "queued")
            .order_by(WorkUnit.id)
        )
    )


def fold_scores_page(session: Session, job: Job, *, after_id: int, limit: int) -> list[FoldScore]:
    """The stored scores of the job's candidates on its folds, in id order after `after_id`."""
    folds = select(JobFold.fingerprint).where(JobFold.job_id == job.id)
    keys = select(JobCandidate.candidate_key).where(JobCandidate.job_id == job.id)
    return list(
        session.scalars(
            select(FoldScore)
            .where(
                FoldScore.dataset_hash == job.dataset_hash,
                FoldScore.fold_fingerprint.in_(folds),
                FoldScore.candidate_key.in_(keys),
                FoldScore.id > after_id,
            )
            .order_by(FoldScore.id)
            .limit(limit)
        )
    )
