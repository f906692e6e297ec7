"""The embedded runner starts no process pool when one process will do (issue 12, item 1), and
takes fast units in batches, as a Celery worker does (item 3).

Every unit records the worker (host:pid) that ran it, so the store shows where units ran: in
this process when the job has too few units for a pool to pay, or when the store answered it.
A batch's units share one claim token, so the store shows how they were grouped too.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from sqlalchemy import func, select

from service.config import load_settings
from service.jobs.execution.batches import batch_unit_ids
from service.jobs.execution.execute import worker_name
from service.jobs.local.driver import pool_workers, run_embedded
from service.store.db import make_engine, make_session_factory
from service.store.models import FoldScore, WorkUnit


def _request(n_neighbors: list[int]) -> dict[str, Any]:
    return {
        "dataset": {"sample": "iris"},
        "target": "target",
        "task": "classification",
        "families": [{"estimator": "KNeighborsClassifier", "grid": {"n_neighbors": n_neighbors}}],
        "outer": {"method": "stratified_kfold", "k": 2, "seed": 0},
        "inner": {"method": "stratified_kfold", "k": 2, "seed": 1},
        "metrics": ["accuracy"],
    }


def _workers_of(url: str, job_id: str) -> list[str | None]:
    engine = make_engine(url)
    try:
        with make_session_factory(engine)() as session:
            return list(session.scalars(select(WorkUnit.worker).where(WorkUnit.job_id == job_id)))
    finally:
        engine.dispose()


def test_pool_size_follows_the_queued_units() -> None:
    assert pool_workers(1, 100) == 1
    assert pool_workers(2, 3) == 1  # fewer than two rounds of two workers
    assert pool_workers(2, 0) == 1  # the store answered every unit
    assert pool_workers(2, 4) == 2
    assert pool_workers(3, 6) == 3


def test_a_job_with_few_units_runs_in_this_process_even_with_two_workers(tmp_path: Path) -> None:
    settings = load_settings({"FOLDWISE_HOME": str(tmp_path / "home")})
    # one candidate: 3 inner units (2 outer folds and all rows) queued at the start
    outcome = run_embedded(_request([5]), settings=settings, workers=2)
    ran_by = _workers_of(settings.database_url, outcome.job_id)
    assert len(ran_by) == 3 + 3  # and 2 outer refits and the final refit added by the fan-in
    assert set(ran_by) == {worker_name()}


def test_a_job_with_enough_units_runs_on_the_pool(tmp_path: Path) -> None:
    settings = load_settings({"FOLDWISE_HOME": str(tmp_path / "home")})
    # four candidates: 12 inner units queued, three rounds of two workers
    outcome = run_embedded(_request([1, 3, 5, 7]), settings=settings, workers=2)
    ran_by = _workers_of(settings.database_url, outcome.job_id)
    assert len(ran_by) == 12 + 3
    assert worker_name() not in ran_by


def _claims_of(url: str, job_id: str) -> tuple[list[tuple[str | None, int, int]], int]:
    """Each unit's (claim token, attempts, fits), and the job's fold-score rows."""
    engine = make_engine(url)
    try:
        with make_session_factory(engine)() as session:
            units = session.execute(
                select(WorkUnit.claim_token, WorkUnit.attempts, WorkUnit.fits).where(
                    WorkUnit.job_id == job_id
                )
            ).all()
            scores = session.scalar(
                select(func.count()).select_from(FoldScore).where(FoldScore.job_id == job_id)
            )
            return [tuple(unit) for unit in units], int(scores or 0)
    finally:
        engine.dispose()


def test_fast_units_run_in_batches_and_each_keeps_its_own_scores(tmp_path: Path) -> None:
    # eight nearest-neighbour candidates on iris: 24 inner units of two fits, each far cheaper
    # to fit than to claim and record one by one; a store each, so nothing is reused
    for workers in (1, 2):
        settings = load_settings({"FOLDWISE_HOME": str(tmp_path / f"home-{workers}")})
        outcome = run_embedded(
            _request([1, 3, 5, 7, 9, 11, 13, 15]), settings=settings, workers=workers
        )
        units, scores = _claims_of(settings.database_url, outcome.job_id)
        assert len(units) == 24 + 3  # and 2 outer refits and the final refit
        assert all(attempts == 1 for _, attempts, _ in units)
        tokens = {token for token, _, _ in units}
        # the 24 inner units in at most eight claims (a batch holds at most an eighth of the
        # work: service/cv/unit_batches.py), the three refits in at most three
        assert None not in tokens and len(tokens) <= 8 + 3, len(tokens)
        # every fit's score stored once, with its own unit: 8 candidates x 2 folds in each of
        # the three inner scopes, the two outer folds' test scores and the final refit's none
        assert sum(fits for _, _, fits in units) == 24 * 2 + 3
        assert scores == 8 * 2 * 3 + 2


def test_the_final_refit_runs_alone_and_first_in_its_stage(tmp_path: Path) -> None:
    # the final refit also writes and stores the model (about half a second where its fit
    # takes milliseconds): left last in a batch of outer refits it was the stage's tail, each other
    # worker idle behind it (traced in tests/benchmarks/bench_nested_interval.py's setting)
    settings = load_settings({"FOLDWISE_HOME": str(tmp_path / "home")})
    outcome = run_embedded(_request([1, 3, 5, 7, 9, 11]), settings=settings, workers=2)
    engine = make_engine(settings.database_url)
    try:
        with make_session_factory(engine)() as session:
            units = session.execute(
                select(WorkUnit.id, WorkUnit.kind, WorkUnit.claim_token)
                .where(WorkUnit.job_id == outcome.job_id)
                .order_by(WorkUnit.id)
            ).all()
            last_stage = [u.id for u in units if u.kind in ("outer_refit", "final_refit")]
            batches = batch_unit_ids(session, last_stage)
    finally:
        engine.dispose()
    (final,) = [u for u in units if u.kind == "final_refit"]
    assert batches[0] == [final.id]
    assert sorted(i for batch in batches for i in batch) == sorted(last_stage)
    # and it ran that way: no other unit shares its claim
    assert [u.id for u in units if u.claim_token == final.claim_token] == [final.id]


def test_in_this_process_each_stage_of_fast_units_is_one_claim(tmp_path: Path) -> None:
    # the same 24 fast inner units run here (one worker): no other worker waits for a batch,
    # so they go in one claim, not eight (service/cv/unit_batches.py, `spread`)
    settings = load_settings({"FOLDWISE_HOME": str(tmp_path / "home")})
    outcome = run_embedded(_request([1, 3, 5, 7, 9, 11, 13, 15]), settings=settings, workers=1)
    units, scores = _claims_of(settings.database_url, outcome.job_id)
    assert len(units) == 24 + 3
    inner_claims = {token for token, _, fits in units if fits == 2}
    assert len(inner_claims) == 1
    assert scores == 8 * 2 * 3 + 2
