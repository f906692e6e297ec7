"""The embedded runner starts no process pool when one process will do (issue 12, item 1).

Every unit records the worker (host:pid) that ran it, so the store shows where units ran: in
this process when the job has too few units for a pool to pay, or when the store answered it.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from sqlalchemy import select

from service.config import load_settings
from service.jobs.execution.execute import worker_name
from service.jobs.local.driver import pool_workers, run_embedded
from service.store.db import make_engine, make_session_factory
from service.store.models import WorkUnit


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
