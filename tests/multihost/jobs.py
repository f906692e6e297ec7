"""A job over REST on the deployment, the moments a fault test waits for, and the final checks."""

from __future__ import annotations

import re
import time
from typing import Any

from distributed.requests import expected_scores, small_request
from distributed.stack import comparable, duplicated_keys, wait_until
from sqlalchemy import func, select

from service.store.models import FoldScore, Job, JobCandidate, WorkUnit

from .deployment import Deployment
from .reference import Reference

# recovery at default settings: a lapsed lease (40 s) or a lost message is found by the next
# reconcile tick (every 30 s); the bound for a dead worker is 90 s (issue 10)
RECOVERY_BOUND_SECONDS = 90
# the job's own compute plus one recovery, with room for a loaded two-core machine
JOB_SECONDS = 300


def fault_request() -> dict[str, Any]:
    """Two forest candidates: 12 units of one to a few seconds, so a fault lands mid-job.

    `reuse` off, so that every test's job computes its scores instead of taking them from an
    earlier job's (each test has its own database anyway; this keeps the plan's count exact).
    """
    return {
        **small_request(),
        "families": [
            {
                "estimator": "RandomForestClassifier",
                "fixed": {"n_estimators": 150, "random_state": 0},
                "grid": {"max_depth": [3, None]},
            },
        ],
        "reuse": False,
    }


def submit(deployment: Deployment, request: dict[str, Any]) -> str:
    """POST the job as a client does; its id."""
    with deployment.client() as client:
        answer = client.post("/v1/jobs", json=request)
    assert answer.status_code == 202, answer.text
    return str(answer.json()["id"])


def claims(deployment: Deployment, job_id: str) -> int:
    """How many claims the job's units have had in all (each claim counts one attempt)."""
    with deployment.stack.sessions() as session:
        total = session.scalar(select(func.sum(WorkUnit.attempts)).where(WorkUnit.job_id == job_id))
        return int(total or 0)


def running_on(deployment: Deployment, job_id: str, host: str) -> WorkUnit | None:
    """The job's unit that `host`'s worker runs now, if any."""
    with deployment.stack.sessions() as session:
        return session.scalars(
            select(WorkUnit).where(
                WorkUnit.job_id == job_id,
                WorkUnit.status == "running",
                WorkUnit.worker.startswith(f"{host}@"),
            )
        ).first()


def fresh_claim(deployment: Deployment, job_id: str, host: str, after_done: int = 1) -> WorkUnit:
    """Wait, once `after_done` units are done, for `host` to claim a unit; that unit.

    Caught within a poll (0.1 s) of its claim, so a fault injected now lands mid-fit.
    """
    stack = deployment.stack
    wait_until(lambda: stack.units_done(job_id) >= after_done, JOB_SECONDS, "units done", stack)
    current = running_on(deployment, job_id, host)
    seen = current.id if current else None

    def new_claim() -> WorkUnit | None:
        unit = running_on(deployment, job_id, host)
        return unit if unit is not None and unit.id != seen else None

    unit: WorkUnit = wait_until(new_claim, JOB_SECONDS, f"{host} claiming a unit", stack)
    return unit


def unit(deployment: Deployment, unit_id: int) -> WorkUnit:
    """A unit's row as stored now."""
    with deployment.stack.sessions() as session:
        return session.get_one(WorkUnit, unit_id)


def report_recovery(fault: str, faulted_at: float, recovered_at: float, what: str) -> float:
    """Print the time from the fault to recovery (pytest -s shows it) and return it."""
    seconds = recovered_at - faulted_at
    print(f"\nmultihost {fault}: fault to recovery {seconds:.1f} s ({what}, default settings)")
    return seconds


def wait_for_claim_after(deployment: Deployment, job_id: str, before: int) -> float:
    """Wait for a unit of the job to be claimed once more than `before` claims; when."""
    wait_until(
        lambda: claims(deployment, job_id) > before,
        JOB_SECONDS,
        "a unit claimed after the fault",
        deployment.stack,
    )
    return time.monotonic()


def assert_complete(
    deployment: Deployment, job_id: str, request: dict[str, Any], reference: Reference
) -> Job:
    """The job succeeded like the embedded run, every score of its plan stored exactly once."""
    stack = deployment.stack
    job = stack.wait_finished(job_id, timeout=JOB_SECONDS)
    with deployment.client() as client:
        answer = client.get(f"/v1/jobs/{job_id}")
    assert answer.status_code == 200, answer.text
    # the embedded run (SQLite, one local process) is the reference: same request, same numbers
    result = answer.json()["result"]
    assert comparable(result) == comparable(reference.result())
    # no shared folder: the worker hosts fetched the table through the store into their own
    table = f"{result['dataset_hash']}.parquet"
    fetched = [host for host, home in deployment.worker_homes().items() if any(home.rglob(table))]
    assert fetched, "no worker host holds the table in its own FOLDWISE_HOME"
    with stack.sessions() as session:
        candidates = session.scalar(select(func.count()).where(JobCandidate.job_id == job_id))
        scores = session.scalar(select(func.count()).where(FoldScore.job_id == job_id))
        # one copy counted per unit: a unit run twice keeps the scores of one copy only
        copies = list(
            session.execute(
                select(FoldScore.unit_id)
                .where(FoldScore.job_id == job_id)
                .group_by(FoldScore.unit_id)
                .having(func.count(func.distinct(FoldScore.worker)) > 1)
            )
        )
    assert copies == []
    # nothing lost: the count the plan implies; nothing twice: no key holds two rows
    assert scores == expected_scores(request, int(candidates or 0))
    assert duplicated_keys(stack, job_id) == []
    return job


def republished_units(deployment: Deployment) -> set[int]:
    """Every unit id a reconcile tick logged as published again, on any worker host."""
    found: set[int] = set()
    for process in deployment.stack.processes:
        text = process.log.read_text(errors="replace") if process.log.exists() else ""
        for listed in re.findall(r"reconcile: republished units \[([0-9, ]*)\]", text):
            found |= {int(n) for n in listed.split(",") if n.strip()}
    return found


def scores_written_by(deployment: Deployment, unit_id: int) -> set[str]:
    """The worker hosts whose labels the unit's fold scores carry."""
    with deployment.stack.sessions() as session:
        labels = session.scalars(select(FoldScore.worker).where(FoldScore.unit_id == unit_id))
        return {label.split("@", 1)[0] for label in labels}
