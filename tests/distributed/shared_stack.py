"""Handing a module's running stack from one test to the next.

Tests that kill no process, flush no broker and change no setting share one stack per module
(tests/distributed/conftest.py). Each must still find what a stack of its own would offer: both
workers and the beat alive, no job or unit of an earlier test still live to take a worker from
it, and no message left in the broker.
"""

from __future__ import annotations

from sqlalchemy import func, select

from service.store.models import Job, WorkUnit
from service.store.statuses import LIVE_JOB, OPEN_UNIT

from .redis_claim import renew_claim
from .stack import Stack, wait_until

# an earlier test's cancelled units stop between fits and their messages drain in seconds
SETTLE_TIMEOUT = 120


def _in_flight(stack: Stack) -> int:
    """Live jobs and open units in the whole store (a cancelled job's unit may still run)."""
    with stack.sessions() as session:
        jobs = session.scalar(select(func.count()).where(Job.status.in_(LIVE_JOB)))
        units = session.scalar(select(func.count()).where(WorkUnit.status.in_(OPEN_UNIT)))
    return int(jobs or 0) + int(units or 0)


def hand_over(stack: Stack) -> Stack:
    """The stack, once fit for the next test; fails naming what an earlier test left behind."""
    ended = [p.name for p in stack.processes if p.popen.poll() is not None]
    assert not ended, (
        f"{ended} ended on a shared stack (a test that kills takes running_stack)\n{stack.logs()}"
    )
    wait_until(
        lambda: _in_flight(stack) == 0 and stack.broker_idle(),
        SETTLE_TIMEOUT,
        "every earlier test's job ended and the broker empty",
        stack,
    )
    renew_claim(stack.env["FOLDWISE_BROKER_URL"])
    return stack
