"""What a job's fold-score rows carry beside the keys: where the fold sits and the candidate.

A score is keyed by (fold fingerprint, candidate key, metric), shared across jobs; where its fold
sits is the job's own plan (`job_fold`). The role, repeat, fold and inner fold, and the
candidate's estimator and params, are looked up once per listing or export and added to each
row, so no reader needs a join. A fold that serves two roles in one job (outer folds and the
final inner folds split all rows alike when their split plans are equal) is listed under the
first of outer, inner, final inner.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.store.models import Candidate, FoldScore, Job, JobCandidate, JobFold

_ROLE_ORDER = {"outer": 0, "inner": 1, "final_inner": 2}
EXTRA_COLUMNS = ("role", "repeat", "fold", "inner_repeat", "inner_fold", "estimator", "params")


def job_metrics(job: Job) -> list[str]:
    """The metrics the job's request asked for."""
    return list((job.request or {}).get("metrics") or [])


@dataclass(frozen=True)
class FoldContext:
    """A job's fold placements and candidates, looked up once."""

    places: dict[str, dict[str, Any]]
    candidates: dict[str, dict[str, Any]]

    def extra(self, fingerprint: str, candidate_key: str) -> dict[str, Any]:
        """The placement and candidate columns of one score."""
        place = self.places.get(fingerprint, dict.fromkeys(EXTRA_COLUMNS[:5]))
        candidate = self.candidates.get(candidate_key, {"estimator": None, "params": None})
        return {**place, **candidate}

    def flat_extra(self, fingerprint: str, candidate_key: str) -> dict[str, Any]:
        """As `extra`, with params as sorted JSON text (one cell in CSV and Parquet)."""
        row = self.extra(fingerprint, candidate_key)
        row["params"] = None if row["params"] is None else json.dumps(row["params"], sort_keys=True)
        return row


def _place(fold: JobFold) -> dict[str, Any]:
    if fold.role == "outer":
        return {
            "role": "outer",
            "repeat": fold.repeat,
            "fold": fold.fold_index,
            "inner_repeat": None,
            "inner_fold": None,
        }
    # inner folds of an outer fold name it as their parent; final inner folds have none
    return {
        "role": fold.role,
        "repeat": fold.parent_repeat,
        "fold": fold.parent_fold,
        "inner_repeat": fold.repeat,
        "inner_fold": fold.fold_index,
    }


def fold_context(session: Session, job_id: str) -> FoldContext:
    """The job's placements by fold fingerprint and candidates by key."""
    folds = session.scalars(select(JobFold).where(JobFold.job_id == job_id)).all()
    places: dict[str, dict[str, Any]] = {}
    for fold in sorted(folds, key=lambda f: _ROLE_ORDER.get(f.role, 9)):
        places.setdefault(fold.fingerprint, _place(fold))
    rows = session.execute(
        select(Candidate)
        .join(JobCandidate, JobCandidate.candidate_key == Candidate.candidate_key)
        .where(JobCandidate.job_id == job_id)
    ).scalars()
    candidates = {c.candidate_key: {"estimator": c.estimator, "params": c.params} for c in rows}
    return FoldContext(places, candidates)


def describe_score(score: FoldScore, context: FoldContext) -> dict[str, Any]:
    """The extra columns of one stored score."""
    return context.extra(score.fold_fingerprint, score.candidate_key)
