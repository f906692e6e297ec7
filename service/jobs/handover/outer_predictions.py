"""A succeeded job's outer test predictions, read back from the stored fold predictions.

Every outer refit unit keeps its pick's predictions on the outer test rows (the `fold_prediction`
row of that fold and candidate, whichever job computed it). Read here fold by fold, in result
v1's outer order, with the rows in the order the fold lists them (the plan's, rebuilt from the
stored request), so a caller never holds more than one fold at a time.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

from sqlalchemy.orm import Session, sessionmaker

from service.cv.predictions import StoredPredictions
from service.cv.slices import OuterPredictions
from service.jobs.execution.plans import LoadedPlan
from service.store.models import FoldPrediction, Job
from service.store.statuses import JobStatus


class NotReady(Exception):
    """The job has no such output (yet): it did not succeed, or it is not a selection job.

    The routes answer it with a 409 problem carrying this sentence.
    """


def require_result(job: Job, what: str) -> dict[str, Any]:
    """The result v1 of a succeeded selection job, else NotReady saying why."""
    if job.kind != "selection":
        raise NotReady(
            f"job {job.id} is a {job.kind} job; its {what} belongs to each selection job it "
            f"started (GET /v1/jobs?... lists them with parent_id {job.id})."
        )
    if job.status != JobStatus.SUCCEEDED or job.result is None:
        why = f": {job.error.strip().splitlines()[-1]}" if job.error else ""
        raise NotReady(
            f"job {job.id} is {job.status}{why}; a {what} exists once the job has succeeded."
        )
    return job.result


def _outer_fold(loaded: LoadedPlan, repeat: int, index: int) -> Any:
    for fold in loaded.plan.outer:
        if fold.repeat == repeat and fold.index == index:
            return fold
    raise KeyError((repeat, index))


def read_outer(session: Session, loaded: LoadedPlan, outer_row: dict[str, Any]) -> OuterPredictions:
    """One outer fold's predictions (result v1's `outer` row names the fold and its pick)."""
    fold = _outer_fold(loaded, outer_row["repeat"], outer_row["fold"])
    key = outer_row["pick"]["candidate_key"]
    stored = session.get(FoldPrediction, (loaded.dataset_hash, fold.fingerprint, key))
    if stored is None:
        raise NotReady(
            f"the predictions of outer fold {fold.index} (repeat {fold.repeat}) were not kept: "
            "the job was computed before foldwise kept predictions; run it again with reuse off."
        )
    predictions = StoredPredictions.decode(stored.data, loaded.plan.spec.task, stored.classes)
    return OuterPredictions(fold.repeat, fold.index, key, fold.test, predictions)


def each_outer(
    sessions: sessionmaker[Session], loaded: LoadedPlan, result: dict[str, Any]
) -> Iterator[OuterPredictions]:
    """The outer folds' predictions one at a time, each read in its own short session."""
    for row in result["outer"]:
        with sessions() as session:
            yield read_outer(session, loaded, row)


def all_outer(
    session: Session, loaded: LoadedPlan, result: dict[str, Any]
) -> list[OuterPredictions]:
    """Every outer fold's predictions (for summaries that need them together)."""
    return [read_outer(session, loaded, row) for row in result["outer"]]
