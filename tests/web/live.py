"""A live `foldwise serve` subprocess (embedded default) and a headless Debian Chromium for it."""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import httpx
from sqlalchemy.orm import Session, sessionmaker

from service.auth import create_token
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


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


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
    port = _free_port()
    env = {k: v for k, v in os.environ.items() if not k.startswith("FOLDWISE_")}
    env.update(FOLDWISE_HOME=str(home), FOLDWISE_LOCAL_WORKERS="2")
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
    command = [sys.executable, "-m", "service.cli.main", "serve", "--port", str(port)]
    with log.open("wb") as out:
        proc = subprocess.Popen(command, env=env, stdout=out, stderr=subprocess.STDOUT, cwd=REPO)
    base = f"http://127.0.0.1:{port}"
    engine = None
    try:
        deadline = time.monotonic() + 60
        while True:
            assert proc.poll() is None, f"server exited: {log.read_text()[-2000:]}"
            try:
                if httpx.get(f"{base}/healthz", timeout=1).status_code == 200:
                    break
            except httpx.TransportError:
                pass
            assert time.monotonic() < deadline, "server did not start"
            time.sleep(0.2)
        settings = load_settings({"FOLDWISE_HOME": str(home)})
        engine = make_engine(settings.database_url)
        yield LiveServer(base, make_session_factory(engine))
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        if engine is not None:
            engine.dispose()
