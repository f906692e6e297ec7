"""A live `foldwise serve` in a subprocess on a free local port, and a look into its store.

Tests talk to it over real HTTP with httpx, as another team's service would; they read the SQLite
store it writes only to check what was (or was not) kept.
"""

from __future__ import annotations

import os
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import httpx
from sqlalchemy import func, select
from sqlalchemy.orm import Session, sessionmaker

from service.auth import create_token
from service.cli.local_server import free_port, serving
from service.config import Settings, load_settings
from service.store.db import make_engine, make_session_factory
from service.store.models import Dataset, Job

REPO = Path(__file__).resolve().parents[2]
# generous: on a shared 2-core machine the local pool's start (importing scikit-learn) can take
# most of a minute
START_TIMEOUT = 120.0
JOB_TIMEOUT = 180.0

# Small and fast: iris ships with scikit-learn; two candidates, 3 outer x 3 inner folds.
IRIS_REQUEST: dict[str, Any] = {
    "dataset": {"sample": "iris"},
    "target": "target",
    "features": None,
    "task": "classification",
    "families": [
        {"estimator": "LogisticRegression", "fixed": {"max_iter": 500}, "grid": {"C": [0.1, 1.0]}}
    ],
    "preprocess": "auto",
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
    "metrics": ["accuracy", "balanced_accuracy"],
    "pick_by": "accuracy",
}


def server_env(home: Path, **extra: str) -> dict[str, str]:
    """The environment with the embedded default under `home` and nothing else configured."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("FOLDWISE_")}
    env["FOLDWISE_HOME"] = str(home)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
    env.update(extra)
    return env


@dataclass
class Server:
    """A running server: its URL, settings (as the server reads them) and its store."""

    base_url: str
    env: dict[str, str]
    settings: Settings
    sessions: sessionmaker[Session]

    def token(self, team: str, scopes: tuple[str, ...] = ("submit", "read"), **kw: Any) -> str:
        """A new token written straight into the server's store."""
        with self.sessions.begin() as session:
            return create_token(session, team=team, scopes=list(scopes), **kw)

    def client(self, token: str | None = None) -> httpx.Client:
        """An HTTP client for the server, with a bearer token if given."""
        headers = {"Authorization": f"Bearer {token}"} if token else {}
        return httpx.Client(base_url=self.base_url, headers=headers, timeout=60)

    def count_jobs(self) -> int:
        """Jobs in the store."""
        with self.sessions() as session:
            return int(session.scalar(select(func.count()).select_from(Job)) or 0)

    def count_datasets(self) -> int:
        """Dataset rows in the store."""
        with self.sessions() as session:
            return int(session.scalar(select(func.count()).select_from(Dataset)) or 0)

    def stored_files(self) -> set[str]:
        """Every file in the dataset store and the upload spool."""
        found: set[str] = set()
        for folder in (self.settings.dataset_dir, self.settings.upload_dir):
            if folder.exists():
                found |= {str(p) for p in folder.rglob("*") if p.is_file()}
        return found

    def snapshot(self) -> tuple[int, int, set[str]]:
        """What a refused request must leave unchanged: jobs, datasets, stored files."""
        return self.count_jobs(), self.count_datasets(), self.stored_files()

    def wait_for_job(self, client: httpx.Client, job_id: str) -> dict[str, Any]:
        """Poll GET /v1/jobs/{id} until the job ends; fail the test past the timeout."""
        deadline = time.monotonic() + JOB_TIMEOUT
        while True:
            job: dict[str, Any] = client.get(f"/v1/jobs/{job_id}").json()
            if job["status"] not in ("queued", "running"):
                return job
            assert time.monotonic() < deadline, f"job {job_id} still {job['status']}"
            time.sleep(0.3)


@contextmanager
def running_server(home: Path, log: Path, **extra_env: str) -> Iterator[Server]:
    """Start `python -m service.cli.main serve` on a free port until the block ends."""
    env = server_env(home, **extra_env)
    with serving(free_port(), log, start_timeout=START_TIMEOUT, env=env, cwd=REPO) as server:
        settings = load_settings(env)
        engine = make_engine(settings.database_url)
        try:
            yield Server(server.base_url, env, settings, make_session_factory(engine))
        finally:
            engine.dispose()
