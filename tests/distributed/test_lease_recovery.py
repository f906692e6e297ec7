"""A worker SIGKILLed mid-unit at default settings: its unit is taken again within about a minute.

Nothing is tuned here (the unit time limit stays 3000 s, the lease, heartbeat, reconcile period
and republish delay at their defaults): the deployment an operator gets. Units run longer than a
heartbeat, so the victim's lease has been renewed by its pool process before the kill; once the
process group is dead nobody renews it, the lease lapses, the beat's reconciler publishes the unit
again and the other worker claims it. The job succeeds with every fold score of its plan stored
once.
"""

from __future__ import annotations

import time
from datetime import timedelta
from typing import Any

import pytest
from sqlalchemy import func, select

from service.store.models import FoldScore, JobCandidate, WorkUnit

from .requests import expected_scores, small_request
from .stack import Stack, duplicated_keys, running_units, wait_until

# the promise: a dead worker's unit runs again within 90 s of the kill (issue 10)
RECOVERY_BOUND_SECONDS = 90


def _long_units() -> dict[str, Any]:
    """One forest candidate big enough that an inner unit outlasts two heartbeats.

    On a quiet machine 2,500 trees gave 7 s units, done before any renewal could be seen.
    """
    return {
        **small_request(),
        "families": [
            {
                "estimator": "RandomForestClassifier",
                "fixed": {"n_estimators": 8000, "max_depth": 6, "random_state": 0},
            },
        ],
    }


@pytest.mark.slow
def test_a_worker_killed_mid_unit_at_default_settings_is_replaced_within_ninety_seconds(
    running_stack: Stack,
) -> None:
    # the shared stack sets only the addresses: every limit at its default (conftest.py)
    stack = running_stack
    lease = stack.settings.unit_lease
    request = _long_units()
    job_id = stack.submit(request)

    def renewed_after_one_done() -> WorkUnit | None:
        # a unit some pool process has held past one heartbeat: its lease was pushed forward
        if stack.units_done(job_id) < 1:
            return None
        for unit in running_units(stack, job_id):
            assert unit.started_at is not None and unit.lease_until is not None
            if unit.lease_until - unit.started_at > lease + timedelta(seconds=1):
                return unit
        return None

    victim = wait_until(renewed_after_one_done, 240, "a running unit with a renewed lease", stack)
    node = victim.worker.split("@", 1)[0]
    process = next(p for p in stack.processes if p.name == node)
    # the whole group, as when the machine dies: nothing is acknowledged, requeued or recorded
    process.kill_group()
    killed_at = time.monotonic()
    process.popen.wait(timeout=10)

    def claimed_again() -> WorkUnit | None:
        with stack.sessions() as session:
            unit = session.get_one(WorkUnit, victim.id)
            return unit if unit.attempts > victim.attempts else None

    again = wait_until(claimed_again, 180, "the killed worker's unit claimed again", stack)
    recovery = time.monotonic() - killed_at
    every = stack.settings.reconcile_seconds
    print(
        f"\nkill to unit {victim.id} taken again by {again.worker}: {recovery:.1f} s "
        f"(lease {lease.total_seconds():g} s, reconcile every {every:g} s)"
    )
    assert again.worker.split("@", 1)[0] != node
    assert recovery < RECOVERY_BOUND_SECONDS

    stack.wait_finished(job_id, timeout=400)
    with stack.sessions() as session:
        candidates = session.scalar(select(func.count()).where(JobCandidate.job_id == job_id))
        scores = session.scalar(select(func.count()).where(FoldScore.job_id == job_id))
        attempts = dict(
            session.execute(select(WorkUnit.id, WorkUnit.attempts).where(WorkUnit.job_id == job_id))
            .tuples()
            .all()
        )
    # every score of the plan, each once; only the victim's unit needed a second claim
    assert scores == expected_scores(request, int(candidates or 0))
    assert duplicated_keys(stack, job_id) == []
    assert {u: a for u, a in attempts.items() if a != 1} == {victim.id: 2}
