"""Successive halving's round units on real Celery workers (Redis, PostgreSQL).

scikit-learn is the reference: HalvingGridSearchCV (resource="n_samples") inside cross_validate
on load_wine, a table that ships with scikit-learn, with the same splits and seeds
(tests/engine/test_halving.py builds it from scikit-learn alone).
"""

from __future__ import annotations

from typing import Any

from engine.test_halving import CASES, check_against_reference
from sqlalchemy import select

from service.store.models import FoldScore, WorkUnit

from .stack import Stack

CASE = "wine-three-classes"  # 9 candidates raced in each of 6 searches (5 outer folds, all rows)
TOLERANCE = 1e-9


def test_the_rounds_run_on_workers_and_equal_halving_search_inside_cross_validate(
    shared_stack: Stack,
) -> None:
    stack = shared_stack
    job_id = stack.submit(CASES[CASE].request())
    result: dict[str, Any] = stack.wait_finished(job_id, 600).result  # type: ignore[assignment]
    check_against_reference(result, CASE)  # scikit-learn's HalvingGridSearchCV
    with stack.sessions() as session:
        later = session.execute(
            select(WorkUnit.halving_round, FoldScore.worker)
            .join(FoldScore, FoldScore.unit_id == WorkUnit.id)
            .where(WorkUnit.job_id == job_id, WorkUnit.halving_round > 0)
        ).all()
    # the later rounds' units were added by a worker's fan-in and ran on both worker processes
    assert {r for r, _ in later} == {1}
    assert len({worker for _, worker in later}) == 2, later
