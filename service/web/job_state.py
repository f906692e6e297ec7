"""What a job page says about a job that has no result: progress, the error and what to do."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.store.models import Candidate, Job, WorkUnit
from service.store.statuses import UnitStatus

# A page of a job still queued or running reloads itself this often (an HTTP Refresh header,
# no script); the page says so and links to a copy that stays still.
REFRESH_SECONDS = 10
_STAGES = {
    "inner": "scoring candidates on the inner folds",
    "refit": "refitting each outer fold's pick and the final pick",
    "result": "assembling the result",
}


@dataclass(frozen=True)
class Failure:
    """Why a job failed: the error line, the unit's full text and the candidate it was fitting."""

    summary: str
    detail: str | None
    candidate: dict[str, Any] | None
    advice: str


def progress(job: Job) -> dict[str, Any]:
    """Units done of units known so far, as a share, and the stage in words."""
    total = max(job.units_total, 0)
    share = job.units_done / total if total else 0.0
    return {
        "done": job.units_done,
        "total": total,
        "percent": round(100 * share),
        "stage": _STAGES.get(job.stage, job.stage),
    }


def failure(session: Session, job: Job) -> Failure:
    """The failed unit's error and candidate (when a unit failed), with advice that fits it."""
    row = session.execute(
        select(WorkUnit.error, Candidate.estimator, Candidate.params)
        .join(Candidate, Candidate.candidate_key == WorkUnit.candidate_key)
        .where(WorkUnit.job_id == job.id, WorkUnit.status == UnitStatus.FAILED)
        .order_by(WorkUnit.finished_at)
        .limit(1)
    ).first()
    summary = (job.error or "no error text was recorded").strip().splitlines()[-1]
    detail = row.error if row is not None else job.error
    candidate = {"estimator": row.estimator, "params": dict(row.params)} if row else None
    if "gave up" in summary:
        advice = (
            "The workers running this job died or ran out of time repeatedly. Check the worker "
            "logs and their time limits, then submit the request again: every score already "
            "stored is reused, so finished work is not repeated."
        )
    elif job.kind == "learning_curve":
        advice = (
            "One training size failed, so the curve stopped. Open that size's job (named above) "
            "for its error, change the request and submit it again."
        )
    elif candidate is not None:
        advice = (
            "Fitting the candidate below raised this error, so the job stopped: its "
            "hyperparameters may not suit this table (for example more neighbours than training "
            "rows). Change or remove that candidate in the request and submit it again; scores "
            "already stored are reused."
        )
    else:
        advice = "Read the error below, fix the request or the data, and submit it again."
    return Failure(summary, detail if detail != summary else None, candidate, advice)


def units_by_status(session: Session, job_id: str) -> dict[str, int]:
    """How many of the job's units are queued, running, done, failed or cancelled."""
    rows = session.execute(
        select(WorkUnit.status, func.count())
        .where(WorkUnit.job_id == job_id)
        .group_by(WorkUnit.status)
    )
    return {status: int(n) for status, n in rows}
