"""`foldwise serve` (embedded) SIGKILLed mid-job: no pool process outlives it, and a restart on
the same store takes the killed units back within a minute and finishes the job.

A kill -9 gives the server no chance to stop its pool or hand its claims back (an OOM kill, a
container stop). Its pool processes must die with it (the kernel kills them when their parent
goes, service/processes.py), and the units they held stay `running` under leases nobody renews.
The restarted server, at default settings (lease 40 s), must take those units back within a
minute (it sees their holders' pids are gone, so it need not wait for the leases), run the units
still queued, and finish the job with every fold score of the plan stored once.
"""

from __future__ import annotations

import os
import signal
import sqlite3
import time
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import httpx
from distributed.requests import expected_scores

from service.auth import create_token
from service.cli.local_server import free_port, serving
from service.config import load_settings
from service.store.db import make_engine, make_session_factory

from .processes import alive, descendants
from .server import JOB_TIMEOUT, REPO, START_TIMEOUT, server_env

# breast_cancer ships with scikit-learn; 300 trees a fit make each inner unit take seconds, so
# units are mid-fit when the kill comes, and 2 x 4 inner units keep the whole job short
REQUEST: dict[str, Any] = {
    "dataset": {"sample": "breast_cancer"},
    "target": "target",
    "task": "classification",
    "families": [
        {
            "estimator": "RandomForestClassifier",
            "fixed": {"n_estimators": 300, "random_state": 0},
            "grid": {"max_depth": [2, 4]},
        }
    ],
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
    "metrics": ["accuracy", "roc_auc"],
    "pick_by": "accuracy",
}
# issue 10: the restarted server takes its units back within a minute
TAKE_BACK_SECONDS = 60


def _rows(store: Path, sql: str, *args: Any) -> list[tuple[Any, ...]]:
    with sqlite3.connect(store) as con:
        return list(con.execute(sql, args))


def _running(store: Path) -> list[int]:
    return [r[0] for r in _rows(store, "SELECT id FROM work_unit WHERE status = 'running'")]


def _claimed_after(store: Path, unit_ids: list[int], after: datetime) -> datetime | None:
    """When the last of these units was claimed again after `after` (None: not all yet)."""
    marks = ",".join("?" * len(unit_ids))
    rows = _rows(store, f"SELECT started_at FROM work_unit WHERE id IN ({marks})", *unit_ids)
    times = [datetime.fromisoformat(r[0]).replace(tzinfo=UTC) for r in rows if r[0]]
    again = [t for t in times if t > after]
    return max(again) if len(again) == len(unit_ids) else None


def _wait(condition: Any, timeout: float, what: str) -> Any:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = condition()
        if value:
            return value
        time.sleep(0.2)
    raise AssertionError(f"not within {timeout}s: {what}")


def test_a_killed_server_leaves_no_pool_and_its_restart_takes_the_units_back(
    tmp_path: Path,
) -> None:
    home = tmp_path / "home"
    env = server_env(home)
    settings = load_settings(env)
    store = home / "foldwise.sqlite"
    with serving(
        free_port(), tmp_path / "first.log", start_timeout=START_TIMEOUT, env=env, cwd=REPO
    ) as first:
        engine = make_engine(settings.database_url)
        with make_session_factory(engine).begin() as session:
            token = create_token(session, team="plant", scopes=["submit", "read"])
        engine.dispose()
        headers = {"Authorization": f"Bearer {token}"}
        with httpx.Client(base_url=first.base_url, headers=headers, timeout=60) as client:
            answer = client.post("/v1/jobs", json=REQUEST)
            assert answer.status_code == 202, answer.text
            job_id = answer.json()["id"]
        held = _wait(lambda: _running(store), 120, "a unit running on the pool")
        pool = descendants(first.process.pid)
        assert pool, "the server has no pool processes"
        os.kill(first.process.pid, signal.SIGKILL)  # the server alone, as an OOM kill does
        killed_at = datetime.now(UTC)
        first.process.wait(timeout=10)
        # the kernel ends every process below the server: nothing keeps fitting unowned
        survivors = _wait(
            lambda: not [p for p in pool if alive(p)] or None, 10, "the pool dying with it"
        )
        assert survivors
    still_running = _running(store)
    assert set(held) <= set(still_running), "a killed unit was handed back without its lease"

    restarted_at = datetime.now(UTC)
    with serving(
        free_port(), tmp_path / "second.log", start_timeout=START_TIMEOUT, env=env, cwd=REPO
    ) as second:
        healthy = (datetime.now(UTC) - restarted_at).total_seconds()
        taken_back = _wait(
            lambda: _claimed_after(store, still_running, killed_at),
            TAKE_BACK_SECONDS + START_TIMEOUT,
            "the killed units claimed again",
        )
        print(
            f"\nkill -> units taken back: {(taken_back - killed_at).total_seconds():.1f} s; "
            f"restart -> taken back: {(taken_back - restarted_at).total_seconds():.1f} s "
            f"(of which starting until /healthz answered: {healthy:.1f} s)"
        )
        assert (taken_back - restarted_at).total_seconds() < TAKE_BACK_SECONDS
        with httpx.Client(base_url=second.base_url, headers=headers, timeout=60) as client:
            deadline = time.monotonic() + JOB_TIMEOUT
            while (job := client.get(f"/v1/jobs/{job_id}").json())["status"] in (
                "queued",
                "running",
            ):
                assert time.monotonic() < deadline, f"job {job_id} still {job['status']}"
                time.sleep(0.5)
    assert job["status"] == "succeeded", job
    scores = _rows(store, "SELECT COUNT(*) FROM fold_score WHERE job_id = ?", job_id)[0][0]
    candidates = _rows(store, "SELECT COUNT(*) FROM job_candidate WHERE job_id = ?", job_id)[0][0]
    # every fold score of the plan, once each: the killed copies recorded nothing
    assert scores == expected_scores(REQUEST, candidates)
    attempts = _rows(
        store,
        f"SELECT attempts FROM work_unit WHERE id IN ({','.join('?' * len(still_running))})",
        *still_running,
    )
    assert all(a[0] == 2 for a in attempts)
