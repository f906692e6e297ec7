"""Queueing notifications in the caller's transaction, so a finished job and its notice commit
together (or not at all); the delivery tick sends them later."""

from __future__ import annotations

from typing import Any

from sqlalchemy.orm import Session

from service.store.db import utcnow
from service.store.models import Job, WebhookDelivery
from service.store.statuses import JobStatus

JOB_EVENT = "job.finished"
REFRESH_EVENT = "refresh.finished"


def _iso(moment: Any) -> str | None:
    return moment.isoformat() if moment is not None else None


def queue_delivery(
    session: Session,
    *,
    team: str,
    url: str,
    event: str,
    body: dict[str, Any],
    job_id: str | None = None,
    refresh_id: int | None = None,
) -> WebhookDelivery:
    """Add a pending delivery, due now."""
    delivery = WebhookDelivery(
        team=team,
        url=url,
        event=event,
        body={"event": event, **body},
        status="pending",
        job_id=job_id,
        refresh_id=refresh_id,
        next_attempt_at=utcnow(),
    )
    session.add(delivery)
    return delivery


def job_notice(job: Job) -> dict[str, Any]:
    """What a job's webhook says: its final status and, when it succeeded, pick and estimate."""
    body: dict[str, Any] = {
        "job_id": job.id,
        "status": job.status,
        "dataset_hash": job.dataset_hash,
        "finished_at": _iso(job.finished_at),
        "links": {"job": f"/v1/jobs/{job.id}"},
    }
    result = job.result or {}
    if job.status == JobStatus.SUCCEEDED and result:
        pick_by = result.get("pick_by")
        final = result.get("final_pick") or {}
        body["pick_by"] = pick_by
        body["estimate"] = (result.get("estimate") or {}).get(pick_by)
        body["final_pick"] = {k: final.get(k) for k in ("candidate_key", "estimator", "params")}
    if job.error:
        body["error"] = job.error
    return body


def queue_job_notice(session: Session, job_id: str) -> None:
    """Queue the job's webhook, if it names one; call where its status became final."""
    job = session.get(Job, job_id)
    if job is None or not job.webhook_url:
        return
    session.flush()  # the status update may still be pending in the unit of work
    session.refresh(job)
    queue_delivery(
        session,
        team=job.team,
        url=job.webhook_url,
        event=JOB_EVENT,
        body=job_notice(job),
        job_id=job.id,
    )
