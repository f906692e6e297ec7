"""50 concurrent readers for 20 s on the embedded server and on the PostgreSQL one: no errors,
/healthz answered within a second throughout, and the server itself again at once afterwards.

A 429 with Retry-After is back-pressure, not an error (the readers wait and ask again; they are
counted and printed); a 429 without Retry-After, any other status, a transport error or a
request unanswered after 10 s fails the test. Figures at 50 and 200 readers:
tests/benchmarks/bench_readers.py.
"""

from __future__ import annotations

import copy
import os
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest
from api.load import LoadReport, run_readers
from api.server import IRIS_REQUEST, Server, running_server

from .stack import REPO, Stack

READERS, SECONDS = 50, 20.0


def _finished_job(server: Server) -> tuple[str, str]:
    token = server.token("readers")
    with server.client(token) as client:
        answer = client.post("/v1/jobs", json=copy.deepcopy(IRIS_REQUEST))
        assert answer.status_code == 202, answer.text
        job = server.wait_for_job(client, answer.json()["id"])
    assert job["status"] == "succeeded", job["error"]
    return token, job["id"]


def _check(report: LoadReport, label: str) -> None:
    print(report.line(label))
    assert not report.errors, report.errors[:5]
    assert report.latencies, "no request was answered"
    assert report.probes and report.missed_probes == 0, report.probes
    assert report.recovery_seconds < 1.0


@pytest.fixture
def embedded_server(tmp_path: Path) -> Iterator[Server]:
    with running_server(tmp_path / "home", tmp_path / "server.log") as server:
        yield server


@pytest.fixture
def postgresql_server(tmp_path: Path, postgresql_url: str, redis_url: str) -> Iterator[Server]:
    env = {"FOLDWISE_DATABASE_URL": postgresql_url, "FOLDWISE_BROKER_URL": redis_url}
    home = tmp_path / "home"
    subprocess.run(
        [sys.executable, "-m", "service.cli.main", "db", "upgrade"],
        cwd=REPO,
        env={**os.environ, **env, "FOLDWISE_HOME": str(home)},
        check=True,
        capture_output=True,
    )
    workers = Stack({**env, "FOLDWISE_HOME": str(home)}, home)
    try:
        workers.wait_ready(workers.start_worker("w1"), "ready.")
        with running_server(home, tmp_path / "server.log", **env) as server:
            yield server
    finally:
        workers.stop()


def test_fifty_readers_on_the_embedded_server(embedded_server: Server) -> None:
    token, job_id = _finished_job(embedded_server)
    report = run_readers(embedded_server.base_url, token, job_id, readers=READERS, seconds=SECONDS)
    _check(report, "embedded")


def test_fifty_readers_on_the_postgresql_server(postgresql_server: Server) -> None:
    token, job_id = _finished_job(postgresql_server)
    report = run_readers(
        postgresql_server.base_url, token, job_id, readers=READERS, seconds=SECONDS
    )
    _check(report, "postgresql")
