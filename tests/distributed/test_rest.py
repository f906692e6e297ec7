"""End to end through a live HTTP server: `foldwise serve` (uvicorn) publishing to two workers."""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

import httpx
from sqlalchemy import select

from service.cli.local_server import answers_healthz, free_port
from service.store.models import WorkUnit

from .requests import small_request
from .stack import Stack, comparable, wait_until


def test_a_job_submitted_over_rest_finishes_on_the_workers_like_the_embedded_run(
    shared_stack: Stack, embedded_result: Callable[[dict[str, Any]], dict[str, Any]]
) -> None:
    stack = shared_stack
    port = free_port()
    base = f"http://127.0.0.1:{port}"
    stack.start("api", "serve", "--host", "127.0.0.1", "--port", str(port))
    wait_until(lambda: answers_healthz(base), 60, "the API answering /healthz", stack)
    headers = {"Authorization": f"Bearer {stack.token('rest-e2e')}"}
    request = small_request()

    with httpx.Client(base_url=base, headers=headers, timeout=30) as client:
        submitted = client.post("/v1/jobs", json=request)
        assert submitted.status_code == 202, submitted.text
        location = submitted.headers["location"]
        deadline = time.monotonic() + 90
        while True:
            job = client.get(location).json()
            if job["status"] not in ("queued", "running") or time.monotonic() > deadline:
                break
            time.sleep(0.5)
    assert job["status"] == "succeeded", f"{job}\n{stack.logs()}"
    # the embedded run is the reference: same request, SQLite, one local process
    assert comparable(job["result"]) == comparable(embedded_result(request))
    # the API published to the broker (no local pool): the Celery workers ran every unit
    with stack.sessions() as session:
        runners = set(session.scalars(select(WorkUnit.worker).where(WorkUnit.job_id == job["id"])))
    assert runners and {str(r).split("@", 1)[0] for r in runners} <= {"w1", "w2"}
