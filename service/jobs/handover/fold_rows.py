"""What a job's fold-score rows carry beside the keys: where the fold sits and the candidate.

A score is keyed by (fold fingerprint, candidate key, metric), shared across jobs; where its fold
sits is the job's own plan (`job_fold`). The role, repeat, fold and inner fold, and the
candidate's estimator and params, are looked up once per listing or export and added to each
row, so no reader needs a join. A fold that serves two roles in one job (outer folds and the
final inner folds split all rows alike when their split plans are equal) is listed under the
first of outer, inner, final inner, interval outer, interval inner, halving inner, halving final
inner.

A nested interval's procedure folds are stored as outer folds (and their searches' folds as inner
folds) with repeats from scopes.INTERVAL_REPEAT_BASE up, so they run on the same machinery; a
reader sees them as `interval_outer` / `interval_inner`, numbered as the interval numbers them
(repetition, outer fold, and the part scored in `interval_part`), never as the job's own `outer`
folds, whose mean is the estimate. The stored rows stay as they are.

A halving search's round folds are stored beside the scope's inner folds (role inner, or final
inner for the search on all rows) with repeats from scopes.ROUND_REPEAT_BASE up, which encode the
round. A reader sees them as `halving_inner` / `halving_final_inner`, with the plain inner repeat
in `inner_repeat` and the round (from 0) in `halving_round`, never as inner folds numbered 1000
and up: a round fold holds only a share of the inner fold's rows.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Any

from sqlalchemy import ColumnElement, and_, case, select
from sqlalchemy.orm import Session

from service.cv.scopes import (
    INTERVAL_REPEAT_BASE,
    ROUND_REPEAT_BASE,
    interval_position,
    is_interval_repeat,
    round_position,
)
from service.store.models import Candidate, FoldScore, Job, JobCandidate, JobFold

# the roles a reader sees; the interval's and the halving rounds' are never stored as such
READER_ROLES = (
    "outer",
    "inner",
    "final_inner",
    "interval_outer",
    "interval_inner",
    "halving_inner",
    "halving_final_inner",
)
_ROLE_ORDER = {role: rank for rank, role in enumerate(READER_ROLES)}
# the stored roles whose folds a halving search cuts into rounds, and what a reader calls a cut
_HALVING_ROLES = {"inner": "halving_inner", "final_inner": "halving_final_inner"}
# interval_part, then halving_round, come last so the columns before them keep their places
# (each was appended, none moved)
EXTRA_COLUMNS = (
    "role",
    "repeat",
    "fold",
    "inner_repeat",
    "inner_fold",
    "estimator",
    "params",
    "interval_part",
    "halving_round",
)
_PLACE_COLUMNS = (*EXTRA_COLUMNS[:5], "interval_part", "halving_round")


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
    """The role a reader sees: the stored one, the interval's for a procedure's folds, or the
    halving one for a round's cut of an inner fold."""
    if fold.role == "outer" and is_interval_repeat(fold.repeat):
        return "interval_outer"
    if fold.role == "inner" and is_interval_repeat(fold.parent_repeat):
        return "interval_inner"
    if fold.role in _HALVING_ROLES and round_position(fold.repeat) is not None:
        return _HALVING_ROLES[fold.role]
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
        *(
            ((JobFold.role == stored) & (JobFold.repeat >= ROUND_REPEAT_BASE), shown)
            for stored, shown in _HALVING_ROLES.items()
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
        return and_(
            JobFold.role == "inner",
            JobFold.parent_repeat < INTERVAL_REPEAT_BASE,
            JobFold.repeat < ROUND_REPEAT_BASE,
        )
    if role == "interval_inner":
        return and_(JobFold.role == "inner", JobFold.parent_repeat >= INTERVAL_REPEAT_BASE)
    if role == "halving_inner":
        return and_(
            JobFold.role == "inner",
            JobFold.parent_repeat < INTERVAL_REPEAT_BASE,
            JobFold.repeat >= ROUND_REPEAT_BASE,
        )
    if role == "final_inner":
        return and_(JobFold.role == "final_inner", JobFold.repeat < ROUND_REPEAT_BASE)
    if role == "halving_final_inner":
        return and_(JobFold.role == "final_inner", JobFold.repeat >= ROUND_REPEAT_BASE)
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
            "halving_round": None,
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
            "halving_round": None,
        }
    if role == "outer":
        return {
            "role": "outer",
            "repeat": fold.repeat,
            "fold": fold.fold_index,
            "inner_repeat": None,
            "inner_fold": None,
            "interval_part": None,
            "halving_round": None,
        }
    # inner folds of an outer fold name it as their parent; final inner folds have none. A
    # halving round's cut keeps its inner fold's index; its stored repeat encodes the round
    # beside the inner repeat, told apart here
    halving_round, inner_repeat = round_position(fold.repeat) or (None, fold.repeat)
    return {
        "role": role,
        "repeat": fold.parent_repeat,
        "fold": fold.parent_fold,
        "inner_repeat": inner_repeat,
        "inner_fold": fold.fold_index,
        "interval_part": None,
        "halving_round": halving_round,
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
