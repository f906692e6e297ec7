"""A worker SIGKILLed mid-unit at default settings: the job loses at most about a minute.

Nothing is tuned here (the unit time limit stays 3000 s, the lease, heartbeat, reconcile period
and republish delay at their defaults): the deployment an operator gets. Units run longer than a
heartbeat, so the victim's lease has been renewed by its pool process before the kill; once the
process group is dead nobody renews it, the lease lapses, beat's reconcile tick publishes the
unit again and the other worker claims it when its pool process is free. The job succeeds with
every fold score of its plan stored once.

The issue's promise is that the job finishes within 90 s of the kill plus its own compute. With
one surviving pool process that is the survivor's idle time between the kill and the job's end:
every second it was not fitting is a second the failure cost.
"""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import Any

import pytest
from sqlalchemy import func, select

from service.store.models import FoldScore, JobCandidate, WorkUnit
from service.store.types import utcnow

from .requests import expected_scores, small_request
from .stack import Stack, duplicated_keys, running_units, wait_until

# the promise: the job finishes within 90 s of the kill plus its own compute (issue 10)
RECOVERY_BOUND_SECONDS = 90


def _long_units() -> dict[str, Any]:
    """One forest candidate big enough that an inner unit outlasts a heartbeat.

    On a quiet machine 2,500 trees gave 7 s units, done before any renewal could be seen; 6,000
    should take about 17 s by the same rate, past one heartbeat (10 s) even there (the wait
    below fails the test if no unit ever shows a renewed lease). Two outer by two inner folds
    keep the job to 8 such units: enough for one to be killed while others remain for the
    survivor, without minutes of fits the test learns nothing from.
    """
    return {
        **small_request(),
        "outer": {"method": "stratified_kfold", "k": 2, "seed": 2},
        "inner": {"method": "stratified_kfold", "k": 2, "seed": 1},
        "families": [
            {
                "estimator": "RandomForestClassifier",
                "fixed": {"n_estimators": 6000, "max_depth": 6, "random_state": 0},
            },
        ],
    }


@pytest.mark.slow
def test_a_worker_killed_mid_unit_at_default_settings_costs_the_job_under_ninety_seconds(
    running_stack: Stack,
) -> None:
    # the stack sets only the addresses: every limit at its default (conftest.py)
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
    killed_at = utcnow()
    process.popen.wait(timeout=10)

    def published_again() -> datetime | None:
        with stack.sessions() as session:
            published = session.get_one(WorkUnit, victim.id).published_at
            return published if published is not None and published > killed_at else None

    # beat's own tick, never behind a fit: the lease lapses (40 s at most), then one period (20 s)
    republished_at = wait_until(published_again, 180, "the killed worker's unit published", stack)
    republished = (republished_at - killed_at).total_seconds()

    job = stack.wait_finished(job_id, timeout=600)
    with stack.sessions() as session:
        again = session.get_one(WorkUnit, victim.id)
        candidates = session.scalar(select(func.count()).where(JobCandidate.job_id == job_id))
        scores = session.scalar(select(func.count()).where(FoldScore.job_id == job_id))
        units = list(session.scalars(select(WorkUnit).where(WorkUnit.job_id == job_id)))
    survivor_runs = [
        (unit.started_at, unit.finished_at)
        for unit in units
        if unit.worker is not None and not unit.worker.startswith(f"{node}@")
    ]
    assert job.finished_at is not None and again.worker is not None
    after_kill = (job.finished_at - killed_at).total_seconds()
    busy = _busy_seconds(survivor_runs, killed_at, job.finished_at)
    idle = after_kill - busy
    every = stack.settings.reconcile_seconds
    print(
        f"\nkill -> unit {victim.id} published again: {republished:.1f} s (lease "
        f"{lease.total_seconds():g} s, reconcile every {every:g} s); kill -> job end "
        f"{after_kill:.1f} s, of which the survivor fitted {busy:.1f} s and waited {idle:.1f} s"
    )
    assert again.worker.split("@", 1)[0] != node
    assert republished < RECOVERY_BOUND_SECONDS
    assert idle < RECOVERY_BOUND_SECONDS
    # every score of the plan, each once; only the victim's unit needed a second claim
    assert scores == expected_scores(request, int(candidates or 0))
    assert duplicated_keys(stack, job_id) == []
    assert {unit.id: unit.attempts for unit in units if unit.attempts != 1} == {victim.id: 2}


def _busy_seconds(
    runs: list[tuple[datetime | None, datetime | None]], start: datetime, end: datetime
) -> float:
    """Seconds of [start, end] covered by the runs (a batch's units share one run)."""
    spans = sorted(
        (max(begun, start), min(ended, end))
        for begun, ended in runs
        if begun is not None and ended is not None and ended > start and begun < end
    )
    total, reach = 0.0, start
    for begun, ended in spans:
        if ended > reach:
            total += (ended - max(begun, reach)).total_seconds()
            reach = ended
    return total
