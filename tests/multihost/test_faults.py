"""Faults across hosts, mid-job, at default settings: the job heals and counts every score once.

The server host runs the API (`foldwise serve`, publishing to Celery), beat, PostgreSQL and
Redis; two worker hosts run `foldwise worker --concurrency 1` and reach the server only over
their veth links, with no folder shared (tests/multihost/netns.py). Each test submits a job over
REST, breaks one thing while units run, and checks that the job succeeds with the embedded run's
result, every fold score of its plan stored once, and prints the time from the fault to recovery
(`pytest -m multihost -s` shows it). Nothing is tuned: leases, heartbeat, unit time limit,
reconcile period and republish delay are the defaults an operator gets.
"""

from __future__ import annotations

import threading
import time

import httpx
import pytest
from distributed.stack import wait_until
from sqlalchemy import select

from service.store.models import Job, WorkUnit

from .deployment import Deployment
from .jobs import (
    JOB_SECONDS,
    RECOVERY_BOUND_SECONDS,
    assert_complete,
    claims,
    fault_request,
    fresh_claim,
    report_recovery,
    republished_units,
    scores_written_by,
    submit,
    unit,
    wait_for_claim_after,
)
from .netns import misroute_broker, route_broker_again, set_link
from .reference import Reference
from .servers import REDIS_PORT

pytestmark = [pytest.mark.multihost, pytest.mark.slow]


def _claimed_again_elsewhere(deployment: Deployment, victim: WorkUnit, host: str) -> WorkUnit:
    def taken() -> WorkUnit | None:
        row = unit(deployment, victim.id)
        moved = row.attempts > victim.attempts and not str(row.worker).startswith(f"{host}@")
        return row if moved else None

    again: WorkUnit = wait_until(taken, JOB_SECONDS, "the unit claimed again", deployment.stack)
    return again


def test_a_partitioned_worker_host_is_replaced_and_records_nothing_when_it_returns(
    reference: Reference, deployment: Deployment
) -> None:
    request = fault_request()
    job_id = submit(deployment, request)
    victim = fresh_claim(deployment, job_id, "w1")
    link = deployment.topology.link("w1")
    set_link(deployment.topology.server, link, up=False)
    cut_at = time.monotonic()
    try:
        time.sleep(0.5)  # a record in flight at the cut has landed or never will
        held = unit(deployment, victim.id)
        assert held.status == "running" and held.attempts == victim.attempts, (
            f"w1 recorded unit {victim.id} before the cut: its units are too short to cut mid-fit"
        )
        _claimed_again_elsewhere(deployment, victim, "w1")
        recovery = report_recovery("partition", cut_at, time.monotonic(), "unit claimed on w2")
        # the link comes back only once the unit was re-run elsewhere: w1's copy is late
        wait_until(
            lambda: unit(deployment, victim.id).status == "done",
            JOB_SECONDS,
            "the unit re-run on w2",
            deployment.stack,
        )
    finally:
        set_link(deployment.topology.server, link, up=True)
    assert_complete(deployment, job_id, request, reference)
    # w1's copy finished its fits during the partition and tried to record once it could
    # reach the store: the fence (its claim token is no longer the unit's) refused it
    w1 = deployment.process("w1")
    wait_until(
        lambda: f"unit {victim.id} lost" in w1.log.read_text(errors="replace"),
        JOB_SECONDS,
        "w1 reporting its late copy refused",
        deployment.stack,
    )
    assert scores_written_by(deployment, victim.id) == {"w2"}
    assert unit(deployment, victim.id).attempts == victim.attempts + 1
    assert recovery < RECOVERY_BOUND_SECONDS


def test_a_worker_killed_mid_unit_is_replaced(reference: Reference, deployment: Deployment) -> None:
    request = fault_request()
    job_id = submit(deployment, request)
    victim = fresh_claim(deployment, job_id, "w1")
    deployment.kill("w1")  # the main process and its pool child, as the machine dying
    killed_at = time.monotonic()
    again = _claimed_again_elsewhere(deployment, victim, "w1")
    recovery = report_recovery("SIGKILL", killed_at, time.monotonic(), "unit claimed on w2")
    assert str(again.worker).startswith("w2@")
    assert_complete(deployment, job_id, request, reference)
    assert scores_written_by(deployment, victim.id) == {"w2"}
    assert recovery < RECOVERY_BOUND_SECONDS


def test_a_postgresql_restart_mid_job_is_ridden_out(
    reference: Reference, deployment: Deployment
) -> None:
    request = fault_request()
    job_id = submit(deployment, request)
    fresh_claim(deployment, job_id, "w1")
    before = claims(deployment, job_id)
    stopped_at = time.monotonic()
    deployment.servers.stop_postgresql()  # fast shutdown: every session is cut
    deployment.servers.start_postgresql()
    recovered = wait_for_claim_after(deployment, job_id, before)
    recovery = report_recovery("PostgreSQL restart", stopped_at, recovered, "next unit claimed")
    assert_complete(deployment, job_id, request, reference)
    assert recovery < RECOVERY_BOUND_SECONDS


def test_a_redis_restart_mid_job_loses_the_queue_and_the_store_heals_it(
    reference: Reference, deployment: Deployment
) -> None:
    request = fault_request()
    job_id = submit(deployment, request)
    fresh_claim(deployment, job_id, "w1")
    before = claims(deployment, job_id)
    stopped_at = time.monotonic()
    deployment.servers.stop_redis()  # nothing on disk: queued and unacknowledged messages go
    deployment.servers.start_redis()
    recovered = wait_for_claim_after(deployment, job_id, before)
    recovery = report_recovery("Redis restart", stopped_at, recovered, "next unit claimed")
    assert_complete(deployment, job_id, request, reference)
    assert recovery < RECOVERY_BOUND_SECONDS


def test_the_api_killed_between_commit_and_publish_leaves_a_job_the_reconciler_publishes(
    reference: Reference, deployment: Deployment
) -> None:
    topology, stack = deployment.topology, deployment.stack
    request = fault_request()
    answers: list[httpx.Response | Exception] = []

    def post() -> None:
        try:
            with deployment.client(timeout=120) as client:
                answers.append(client.post("/v1/jobs", json=request))
        except Exception as exc:  # the server dies under it: the client sees a broken request
            answers.append(exc)

    # The seam: the server host's path to its broker leads nowhere for a moment, so the API's
    # publish hangs after the job's commit (no error to log); the API is killed during it.
    broker = topology.server_address(None)
    misroute_broker(topology.server, broker, REDIS_PORT, via=topology.link("void"))
    try:
        submitting = threading.Thread(target=post, daemon=True)
        submitting.start()

        def committed_unpublished() -> list[WorkUnit]:
            with stack.sessions() as session:
                units = list(session.scalars(select(WorkUnit)))
            return units if units and all(u.published_at is None for u in units) else []

        units = wait_until(committed_unpublished, 60, "the job committed", stack)
        assert submitting.is_alive(), f"the submission answered before the kill: {answers}"
        deployment.kill("api")
        killed_at = time.monotonic()
    finally:
        route_broker_again(topology.server)
    submitting.join(timeout=30)
    deployment.start_api("api-restarted")  # as its supervisor would
    with stack.sessions() as session:
        job_id = session.scalars(select(Job.id)).one()
    assert {u.job_id for u in units} == {job_id}
    recovered = wait_for_claim_after(deployment, job_id, 0)
    recovery = report_recovery("API killed", killed_at, recovered, "first unit claimed")
    assert_complete(deployment, job_id, request, reference)
    # the units the API never published were sent by the reconciler, not by a retry of the API
    assert {u.id for u in units} <= republished_units(deployment)
    assert recovery < RECOVERY_BOUND_SECONDS
