"""Cancelling a job on real workers: a flag in the store that units check between fits."""

from __future__ import annotations

from typing import Any

from sqlalchemy import func, select

from service.jobs.lifecycle import cancel_job
from service.store.models import FoldScore, Job, WorkUnit

from .requests import slow_request
from .stack import Stack, running_units, wait_until


def _slower_request() -> dict[str, Any]:
    # bigger forests: one inner fit takes seconds (fits got cheaper once a fold's preprocessing
    # was shared), so a unit spans several cancel checks and is caught mid-way
    request = slow_request()
    request["families"][0]["fixed"]["n_estimators"] = 2000
    return request


def test_a_cancelled_job_stops_its_running_units_between_fits(shared_stack: Stack) -> None:
    stack = shared_stack
    job_id = stack.submit(_slower_request())
    held = wait_until(lambda: running_units(stack, job_id) or None, 60, "a unit running", stack)
    with stack.sessions.begin() as session:
        cancel_job(session, session.get_one(Job, job_id))

    def settled() -> bool | None:
        states = stack.unit_states(job_id)
        return True if not states.get("running") else None

    # the check runs at most once a second between fits, and a fit here takes about a second
    wait_until(settled, 30, "no unit still running", stack)
    states = stack.unit_states(job_id)
    with stack.sessions() as session:
        stopped = session.get_one(WorkUnit, held[0].id)
        rows = session.scalar(select(func.count()).where(FoldScore.unit_id == stopped.id))
        job = session.get_one(Job, job_id)
    assert job.status == "cancelled" and job.result is None
    # the unit that was mid-way stopped without recording a partial set of scores
    assert stopped.status == "cancelled"
    assert rows == 0
    # nothing still waits to run; at most the units that had finished before the flag are done
    assert states.get("queued", 0) == 0
    assert states.get("done", 0) < job.units_total
