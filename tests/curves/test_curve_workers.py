"""A learning curve on the distributed path: `foldwise serve` publishing to two Celery workers.

The stack (PostgreSQL store, a private Redis database, real worker processes) is the one the
distributed tests use; its fixtures are imported from there rather than copied.
"""

from __future__ import annotations

import subprocess
import sys
import time

import httpx
from distributed.conftest import (  # noqa: F401 (fixtures)
    module_redis_url,
    module_running_stack,
    shared_stack,
)
from distributed.stack import REPO, Stack, wait_until
from sqlalchemy import select

from service.cli.local_server import answers_healthz, free_port
from service.store.models import WorkUnit

from .requests import curve


def test_a_curve_over_rest_runs_every_size_on_the_workers(shared_stack: Stack) -> None:  # noqa: F811
    live = shared_stack
    port = free_port()
    base = f"http://127.0.0.1:{port}"
    live.start("api", "serve", "--host", "127.0.0.1", "--port", str(port))
    wait_until(lambda: answers_healthz(base), 60, "the API answering /healthz", live)
    command = ["token", "create", "--team", "curves", "--scopes", "submit,read"]
    token = subprocess.run(
        [sys.executable, "-m", "service.cli.main", *command],
        cwd=REPO,
        env=live.process_env(),
        check=True,
        capture_output=True,
        text=True,
    ).stdout.strip()
    with httpx.Client(base_url=base, headers={"Authorization": f"Bearer {token}"}) as client:
        submitted = client.post("/v1/jobs", json=curve(sizes=[0.25, 1.0]), timeout=60)
        assert submitted.status_code == 202, submitted.text
        deadline = time.monotonic() + 120
        while True:
            parent = client.get(submitted.headers["location"], timeout=30).json()
            if parent["status"] not in ("queued", "running") or time.monotonic() > deadline:
                break
            time.sleep(0.5)
    assert parent["status"] == "succeeded", f"{parent}\n{live.logs()}"
    points = parent["result"]["points"]
    assert [p["size"] for p in points] == [0.25, 1.0]
    # the API published the children's units and the workers ran all of them, but for the
    # ones one size took from the other's stored scores: the sizes share the final search on
    # all rows, and a size that reaches it after the other finished it reuses its units
    with live.sessions() as session:
        units = session.execute(
            select(WorkUnit.worker, WorkUnit.reused, WorkUnit.source_job_id).where(
                WorkUnit.job_id.in_(parent["result"]["jobs"])
            )
        ).all()
    runners = {worker for worker, reused, _ in units if not reused}
    assert runners and {str(r).split("@", 1)[0] for r in runners} <= {"w1", "w2"}
    assert {source for _, reused, source in units if reused} <= set(parent["result"]["jobs"])
