"""What a job's fold-score rows carry beside the keys: where the fold sits and the candidate.

A score is keyed by (fold fingerprint, candidate key, metric), shared across jobs; where its fold
sits is the job's own plan (`job_fold`). The role, repeat, fold and inner fold, and the
candidate's estimator and params, are looked up once per listing or export and added to each
row, so no reader needs a join. A fold that serves two roles in one job (outer folds and the
final inner folds split all rows alike when their split plans are equal) is listed under the
first of outer, inner, final inner, interval outer, interval inner.

A nested interval's procedure folds are stored as outer folds (and their searches' folds as inner
folds) with repeats from scopes.INTERVAL_REPEAT_BASE up, so they run on the same machinery; a
reader sees them as `interval_outer` / `interval_inner`, numbered as the interval numbers them
(repetition, outer fold, and the part scored in `interval_part`), never as the job's own `outer`
folds, whose mean is the estimate. The stored rows stay as they are.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Any

from sqlalchemy import ColumnElement, and_, case, select
from sqlalchemy.orm import Session

from service.cv.scopes import INTERVAL_REPEAT_BASE, interval_position, is_interval_repeat
from service.store.models import Candidate, FoldScore, Job, JobCandidate, JobFold

# the roles a reader sees; the last two are the nested interval's, never stored as such
READER_ROLES = ("outer", "inner", "final_inner", "interval_outer", "interval_inner")
_ROLE_ORDER = {role: rank for rank, role in enumerate(READER_ROLES)}
# interval_part comes last so the columns before it keep their places (extended, not moved)
EXTRA_COLUMNS = (
    "role",
    "repeat",
    "fold",
    "inner_repeat",
    "inner_fold",
    "estimator",
    "params",
    "interval_part",
)
_PLACE_COLUMNS = (*EXTRA_COLUMNS[:5], "interval_part")


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
        place = self.places.get(fingerprint, dict.fromkeys(_PLACE_COLUMNS))
        candidate = self.candidates.get(candidate_key, {"estimator": None, "params": None})
        return {**place, **candidate}

    def flat_extra(self, fingerprint: str, candidate_key: str) -> dict[str, Any]:
        """As `extra`, with params as sorted JSON text (one cell in CSV and Parquet)."""
        row = self.extra(fingerprint, candidate_key)
        row["params"] = None if row["params"] is None else json.dumps(row["params"], sort_keys=True)
        return row


def reader_role(fold: JobFold) -> str:
    """The role a reader sees: the stored one, or the interval's for a procedure's folds."""
    if fold.role == "outer" and is_interval_repeat(fold.repeat):
        return "interval_outer"
    if fold.role == "inner" and is_interval_repeat(fold.parent_repeat):
        return "interval_inner"
    return fold.role


def reader_role_column() -> ColumnElement[str]:
    """reader_role in SQL, for grouping job_fold rows by the role a reader sees."""
    return case(
        (
            (JobFold.role == "outer") & (JobFold.repeat >= INTERVAL_REPEAT_BASE),
            "interval_outer",
        ),
        (
            (JobFold.role == "inner") & (JobFold.parent_repeat >= INTERVAL_REPEAT_BASE),
            "interval_inner",
        ),
        else_=JobFold.role,
    )


def reader_role_filter(role: str) -> ColumnElement[bool]:
    """The job_fold rows a reader's `role` names (one of READER_ROLES), for a WHERE clause."""
    if role == "outer":
        return and_(JobFold.role == "outer", JobFold.repeat < INTERVAL_REPEAT_BASE)
    if role == "interval_outer":
        return and_(JobFold.role == "outer", JobFold.repeat >= INTERVAL_REPEAT_BASE)
    if role == "inner":
        return and_(JobFold.role == "inner", JobFold.parent_repeat < INTERVAL_REPEAT_BASE)
    if role == "interval_inner":
        return and_(JobFold.role == "inner", JobFold.parent_repeat >= INTERVAL_REPEAT_BASE)
    return JobFold.role == role


def interval_k(folds: list[JobFold]) -> int:
    """K of a job's nested interval: the parts of one partition, read off its procedure folds
    (repetition 0, outer fold 0 scores each of the K parts once); 0 when there is none."""
    return sum(1 for f in folds if f.role == "outer" and f.repeat == INTERVAL_REPEAT_BASE)


def fold_place(fold: JobFold, k: int) -> dict[str, Any]:
    """Where `fold` sits, as a reader sees it; `k` is the interval's K (interval_k)."""
    role = reader_role(fold)
    if role == "interval_outer":
        # procedure fitted without outer fold o (and part j), scored on part j
        repetition, outer = interval_position(fold.repeat, k)
        return {
            "role": role,
            "repeat": repetition,
            "fold": outer,
            "inner_repeat": None,
            "inner_fold": None,
            "interval_part": fold.fold_index,
        }
    if role == "interval_inner":
        # the procedure's own search: its inner folds name the procedure as their parent
        assert fold.parent_repeat is not None
        repetition, outer = interval_position(fold.parent_repeat, k)
        return {
            "role": role,
            "repeat": repetition,
            "fold": outer,
            "inner_repeat": fold.repeat,
            "inner_fold": fold.fold_index,
            "interval_part": fold.parent_fold,
        }
    if role == "outer":
        return {
            "role": "outer",
            "repeat": fold.repeat,
            "fold": fold.fold_index,
            "inner_repeat": None,
            "inner_fold": None,
            "interval_part": None,
        }
    # inner folds of an outer fold name it as their parent; final inner folds have none
    return {
        "role": fold.role,
        "repeat": fold.parent_repeat,
        "fold": fold.parent_fold,
        "inner_repeat": fold.repeat,
        "inner_fold": fold.fold_index,
        "interval_part": None,
    }


def _listing_order(fold: JobFold) -> tuple[int, int, int, int, int]:
    # role first, then the stored numbers, so a fold serving twice is always listed alike
    return (
        _ROLE_ORDER.get(reader_role(fold), len(_ROLE_ORDER)),
        -1 if fold.parent_repeat is None else fold.parent_repeat,
        -1 if fold.parent_fold is None else fold.parent_fold,
        fold.repeat,
        fold.fold_index,
    )


def fold_context(session: Session, job_id: str) -> FoldContext:
    """The job's placements by fold fingerprint and candidates by key."""
    folds = list(session.scalars(select(JobFold).where(JobFold.job_id == job_id)))
    k = interval_k(folds)
    places: dict[str, dict[str, Any]] = {}
    # a procedure fold of repetition 0 left out of one part alone is one of the job's own outer
    # folds (same rows, same fingerprint): it is listed as the job's, which it is
    # and the procedures without parts o and j, and without j and o, fit the same rows, so
    # their searches share inner folds: listed under the first in stored order (o < j)
    for fold in sorted(folds, key=_listing_order):
        places.setdefault(fold.fingerprint, fold_place(fold, k))
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
