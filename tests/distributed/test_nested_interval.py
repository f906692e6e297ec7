"""The `nested` interval's units on real Celery workers (Redis, PostgreSQL), issue 11.

The reference is the engine-alone driver service/cv/nested_interval_run.py on the same partitions
(its losses are held to scikit-learn's cross_val_predict in tests/engine/test_intervals.py).
"""

from __future__ import annotations

from typing import Any

import pytest
from sqlalchemy import select
from threadpoolctl import threadpool_limits

from service.cv.nested_interval_run import run_nested_interval
from service.cv.plan import SelectionPlan, build_plan
from service.cv.scopes import INTERVAL_REPEAT_BASE
from service.cv.spec import SelectionSpec
from service.datasets.sources import DatasetSource, load_table
from service.store.models import FoldScore, WorkUnit

from .stack import REPO, Stack

# iris ships with scikit-learn (Fisher 1936): 3 outer x 3 inner folds, two candidates, R = 2
REQUEST: dict[str, Any] = {
    "dataset": {"sample": "iris"},
    "target": "target",
    "task": "classification",
    "families": [
        {"estimator": "LogisticRegression", "fixed": {"max_iter": 500}, "grid": {"C": [0.1, 1.0]}}
    ],
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 3},
    "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
    "metrics": ["accuracy"],
    "interval": {"method": "nested", "repetitions": 2},
}


def _plan() -> SelectionPlan:
    """The engine's plan for REQUEST, on iris as the service loads it."""
    table = load_table(DatasetSource(sample="iris"), base_dir=REPO)  # type: ignore[arg-type]
    spec = SelectionSpec.model_validate({k: v for k, v in REQUEST.items() if k != "dataset"})
    return build_plan(spec, table.frame, dict(table.kinds))


def test_the_interval_units_run_on_workers_and_equal_the_engine_alone(
    shared_stack: Stack,
) -> None:
    stack = shared_stack
    job_id = stack.submit(REQUEST)
    result: dict[str, Any] = stack.wait_finished(job_id, 600).result  # type: ignore[assignment]
    with threadpool_limits(1):
        reference = run_nested_interval(_plan(), repetitions=2, seed=3)
    stored = result["estimate"]["accuracy"]["interval"]
    assert stored["method"] == "nested"
    assert stored["point"] == pytest.approx(reference.point, abs=1e-12)
    assert stored["se"] == pytest.approx(reference.loss.se, abs=1e-12)
    assert stored["loss"]["lower"] == pytest.approx(reference.loss.lower, abs=1e-12)
    assert stored["loss"]["upper"] == pytest.approx(reference.loss.upper, abs=1e-12)
    interval = result["work"]["by_purpose"]["interval"]
    found = interval["fits"] + interval["fits_reused"] + interval["fits_shared"]
    assert found == reference.fits
    with stack.sessions() as session:
        workers = set(
            session.scalars(
                select(FoldScore.worker)
                .join(WorkUnit, WorkUnit.id == FoldScore.unit_id)
                .where(WorkUnit.job_id == job_id, WorkUnit.outer_repeat >= INTERVAL_REPEAT_BASE)
            )
        )
    # the procedure units spread over both worker processes, as any job's units do
    assert len(workers) == 2, workers
