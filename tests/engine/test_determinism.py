"""The same request gives the same fold scores, picks and final model, run after run.

A fold score is keyed by (dataset hash, fold fingerprint, candidate key, metric) and written
with a unique key, so when a second job on the same store recomputes a unit, its inserts are
ignored and the job reads the first job's scores: the results are only equal if recomputation
is bit-for-bit deterministic, which the fresh-store case checks on its own.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import func, select

from service.config import Settings, load_settings
from service.store.db import make_engine, make_session_factory
from service.store.models import FoldScore, Job

from .runs import outer_scores, run_engine, run_stored

# Random forests draw bootstrap samples and feature subsets: the request leaves random_state
# out, so the engine's default of 0 is what makes the scores repeatable.
REQUEST = {
    "dataset": {"sample": "wine"},
    "target": "target",
    "task": "classification",
    "families": [
        {
            "estimator": "RandomForestClassifier",
            "fixed": {"n_estimators": 10},
            "grid": {"max_depth": [2, None]},
        },
        {"estimator": "LogisticRegression", "fixed": {"max_iter": 2000}, "grid": {"C": [0.1, 1]}},
    ],
    "preprocess": "auto",
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 7},
    "inner": {"method": "stratified_kfold", "k": 3, "seed": 8},
    "metrics": ["neg_log_loss", "accuracy"],
}
ENGINE_KEYS = (
    "task",
    "n_rows",
    "metrics",
    "pick_by",
    "outer",
    "estimate",
    "final_pick",
    "pick_frequency",
    "optimism_gap",
)


def without_timing(result: dict[str, Any]) -> dict[str, Any]:
    """Result v1 minus `work`, whose seconds differ from run to run."""
    return {k: v for k, v in result.items() if k != "work"}


def stored_jobs(settings: Settings) -> list[Job]:
    engine = make_engine(settings.database_url)
    try:
        with make_session_factory(engine)() as session:
            jobs = list(session.scalars(select(Job).order_by(Job.created_at)))
            session.expunge_all()
            return jobs
    finally:
        engine.dispose()


def fold_score_rows(settings: Settings) -> int:
    engine = make_engine(settings.database_url)
    try:
        with make_session_factory(engine)() as session:
            return int(session.scalar(select(func.count()).select_from(FoldScore)) or 0)
    finally:
        engine.dispose()


@pytest.mark.parametrize(("store", "second_workers"), [("same", 1), ("fresh", 2)])
def test_same_request_gives_identical_results(
    store: str, second_workers: int, settings: Settings, tmp_path: Path
) -> None:
    first = run_stored(REQUEST, settings, workers=1)
    rows_after_first = fold_score_rows(settings)
    other = settings if store == "same" else load_settings({"FOLDWISE_HOME": str(tmp_path / "b")})
    second = run_stored(REQUEST, other, workers=second_workers)

    assert second.job_id != first.job_id
    for metric in REQUEST["metrics"]:
        assert (
            outer_scores(second.result, metric).tolist()
            == outer_scores(first.result, metric).tolist()
        )
        assert (
            second.result["estimate"][metric]["values"]
            == first.result["estimate"][metric]["values"]
        )
    assert second.result["final_pick"]["model_sha256"] == first.result["final_pick"]["model_sha256"]
    assert without_timing(second.result) == without_timing(first.result)
    if store == "same":
        # the unique key kept the second job's recomputed scores out: no duplicate rows
        assert fold_score_rows(settings) == rows_after_first
        # ... and the second job still has a result of its own in the store
        jobs = {job.id: job for job in stored_jobs(settings)}
        assert set(jobs) == {first.job_id, second.job_id}
        for outcome in (first, second):
            job = jobs[outcome.job_id]
            assert job.status == "succeeded"
            assert job.result is not None
            assert without_timing(job.result) == without_timing(outcome.result)


def test_stored_job_agrees_with_the_engine_alone(settings: Settings) -> None:
    # nested.py is the in-process driver the stored path must agree with; the engine run and
    # the stored run both start from the same request
    engine_result = run_engine(REQUEST).result
    stored_result = run_stored(REQUEST, settings, workers=2).result
    stored_final = stored_result["final_pick"]
    assert {k: v for k, v in stored_final.items() if k != "model_sha256"} == engine_result[
        "final_pick"
    ]
    keys = [k for k in ENGINE_KEYS if k != "final_pick"]
    assert {k: stored_result[k] for k in keys} == {k: engine_result[k] for k in keys}
