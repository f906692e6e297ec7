"""Submitting a job: validate, store for the principal's team, honour an idempotency key.

Callers own the session and its transaction; nothing here publishes to a broker (the API does
that after its commit, from the committed rows).
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from service.auth import Action, Principal, authorize
from service.config import Settings
from service.datasets.sources import check_table_size
from service.errors import Conflict
from service.jobs.curves.prepare import create_submission, prepare_submission
from service.jobs.queries.datasets import register_dataset, visible_dataset
from service.json_values import check_json_values
from service.notify.targets import check_webhook_target
from service.store.models import Job


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

    The caller starts a created job after this commit (intake.start.start_submitted).
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
