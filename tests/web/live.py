"""A live `foldwise serve` subprocess (embedded default) and a headless Debian Chromium for it."""

from __future__ import annotations

import os
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import httpx
from sqlalchemy.orm import Session, sessionmaker

from service.auth import create_token
from service.cli.local_server import free_port, serving
from service.config import load_settings
from service.store.db import make_engine, make_session_factory

REPO = Path(__file__).resolve().parents[2]
OUTPUT = REPO / "tests" / "output"
CHROMIUM = "/usr/bin/chromium"
# the flags the brief of these tests fixes: no sandbox (root in CI), nothing fetched at start
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]


@dataclass
class LiveServer:
    """A running server and a session factory on the store it writes."""

    base_url: str
    sessions: sessionmaker[Session]

    def token(self, team: str, scopes: tuple[str, ...] = ("submit", "read")) -> str:
        """A new token written straight into the server's store."""
        with self.sessions.begin() as session:
            return create_token(session, team=team, scopes=list(scopes))

    def job(self, token: str, job_id: str) -> dict[str, Any]:
        """GET /v1/jobs/{id} as the API answers it."""
        headers = {"Authorization": f"Bearer {token}"}
        answer = httpx.get(f"{self.base_url}/v1/jobs/{job_id}", headers=headers, timeout=60)
        assert answer.status_code == 200, answer.text
        job: dict[str, Any] = answer.json()
        return job

    def submit_and_wait(self, token: str, request: dict[str, Any], timeout: float = 300) -> str:
        """Submit a job over HTTP and poll it until it ends; returns the id of a succeeded job."""
        headers = {"Authorization": f"Bearer {token}"}
        with httpx.Client(base_url=self.base_url, headers=headers, timeout=60) as client:
            answer = client.post("/v1/jobs", json=request)
            assert answer.status_code == 202, answer.text
            job_id = str(answer.json()["id"])
            deadline = time.monotonic() + timeout
            while True:
                job = client.get(f"/v1/jobs/{job_id}").json()
                if job["status"] not in ("queued", "running"):
                    break
                assert time.monotonic() < deadline, f"job {job_id} still {job['status']}"
                time.sleep(0.3)
        assert job["status"] == "succeeded", job["error"]
        return job_id


@contextmanager
def live_server(home: Path, log: Path) -> Iterator[LiveServer]:
    """`python -m service.cli.main serve` on a free port, with nothing but FOLDWISE_HOME set."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("FOLDWISE_")}
    env.update(FOLDWISE_HOME=str(home), FOLDWISE_LOCAL_WORKERS="2")
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
    with serving(free_port(), log, start_timeout=60, env=env, cwd=REPO) as server:
        engine = make_engine(load_settings({"FOLDWISE_HOME": str(home)}).database_url)
        try:
            yield LiveServer(server.base_url, make_session_factory(engine))
        finally:
            engine.dispose()
