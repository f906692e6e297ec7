"""SIGTERM stops `foldwise serve` and `foldwise select` within the stated grace, pools included.

A real server (own store, own port) runs a long job on its local pool while a large submission
is still being planned in a request; SIGTERM must end the process and every process below it
within STOP_GRACE seconds (the bound deploy/README.md states), and hand the interrupted units
back to the queue. The command line must stop the same way, marking its job cancelled.
"""

from __future__ import annotations

import contextlib
import copy
import json
import os
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from pathlib import Path
from typing import Any

import httpx
import pytest

from service.cli.local_server import free_port, serving
from service.cli.main import SELECT_STOP_GRACE
from service.cli.server_cmd import STOP_GRACE

from .processes import alive, descendants
from .server import REPO, server_env

# breast_cancer ships with scikit-learn; 300 trees a fit make every inner unit take seconds,
# so units are mid-fit when the signal comes
LONG_REQUEST: dict[str, Any] = {
    "dataset": {"sample": "breast_cancer"},
    "target": "target",
    "task": "classification",
    "families": [
        {
            "estimator": "RandomForestClassifier",
            "fixed": {"n_estimators": 300},
            "grid": {"max_depth": [2, 3, 4, 5, 6, 7, 8, 9]},
        }
    ],
    "outer": {"method": "stratified_kfold", "k": 5, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 5, "seed": 1},
    "metrics": ["accuracy"],
}


def _gone_after_signal(
    proc: subprocess.Popen[bytes], sig: int, limit: float, *, group: bool = False
) -> float:
    """Send `sig` (to the process, or its whole process group); seconds until the process and
    everything below it are gone (or `limit`)."""
    tree = descendants(proc.pid)
    assert tree, "the process has no pool processes to stop"
    started = time.monotonic()
    if group:
        os.killpg(proc.pid, sig)
    else:
        proc.send_signal(sig)
    while time.monotonic() - started < limit + 5:
        if proc.poll() is not None and not any(alive(pid) for pid in tree):
            return time.monotonic() - started
        time.sleep(0.1)
    return time.monotonic() - started


def _running_units(store: Path) -> int:
    with sqlite3.connect(store) as con:
        tables = {row[0] for row in con.execute("SELECT name FROM sqlite_master")}
        if "work_unit" not in tables:  # not migrated yet
            return 0
        return int(
            con.execute("SELECT COUNT(*) FROM work_unit WHERE status = 'running'").fetchone()[0]
        )


def _wait_for_running_units(store: Path, deadline: float) -> None:
    while time.monotonic() < deadline:
        if store.exists() and _running_units(store) > 0:
            return
        time.sleep(0.2)
    raise AssertionError("no unit started running")


def test_sigterm_stops_the_server_and_its_pool_within_the_grace(tmp_path: Path) -> None:
    env = server_env(tmp_path / "home", FOLDWISE_LOCAL_WORKERS="2")
    log = tmp_path / "server.log"
    with serving(free_port(), log, start_timeout=60, env=env, cwd=REPO) as server:
        proc, base = server.process, server.base_url
        from service.auth import create_token
        from service.config import load_settings
        from service.store.db import make_engine, make_session_factory

        engine = make_engine(load_settings(env).database_url)
        with make_session_factory(engine).begin() as session:
            token = create_token(session, team="stoppers", scopes=["submit", "read"])
        engine.dispose()
        headers = {"Authorization": f"Bearer {token}"}
        answer = httpx.post(f"{base}/v1/jobs", json=LONG_REQUEST, headers=headers, timeout=60)
        assert answer.status_code == 202, answer.text
        store = tmp_path / "home" / "foldwise.sqlite"
        _wait_for_running_units(store, time.monotonic() + 60)

        # a submission near the fits cap: planning and storing 1,000 outer folds takes a while,
        # so the signal finds this request still in flight
        big = copy.deepcopy(LONG_REQUEST)
        big["dataset"] = {"sample": "iris"}
        big["families"] = [{"estimator": "GaussianNB", "grid": {"var_smoothing": [1e-9, 1e-8]}}]
        big["outer"] = {"method": "stratified_kfold", "k": 10, "repeats": 100, "seed": 0}
        big["inner"] = {"method": "stratified_kfold", "k": 10, "seed": 1}
        in_flight = threading.Thread(
            target=lambda: _post_quietly(f"{base}/v1/jobs", big, headers), daemon=True
        )
        in_flight.start()
        time.sleep(1.0)

        elapsed = _gone_after_signal(proc, signal.SIGTERM, STOP_GRACE)
        print(f"server and pool gone {elapsed:.1f} s after SIGTERM")
        assert proc.poll() is not None, "the server still runs"
        assert elapsed <= STOP_GRACE, f"took {elapsed:.1f} s; the stated grace is {STOP_GRACE} s"
        # the interrupted units went back to the queue: a restart runs them at once
        assert _running_units(store) == 0


def _post_quietly(url: str, body: dict[str, Any], headers: dict[str, str]) -> None:
    with contextlib.suppress(httpx.TransportError):  # the server went away mid-request
        httpx.post(url, json=body, headers=headers, timeout=60)


def _as_on_a_terminal() -> None:
    # SIGINT at its default, as in a terminal's foreground: a runner started as a background
    # job has it ignored, and every child would inherit that (POSIX)
    signal.signal(signal.SIGINT, signal.SIG_DFL)


@pytest.mark.parametrize("stop", ["sigterm", "ctrl_c"])
def test_a_signal_stops_a_select_run_and_its_pool(tmp_path: Path, stop: str) -> None:
    # SIGTERM goes to the command alone; Ctrl-C sends SIGINT to the terminal's whole process
    # group: the command, its pool and its model-writing helper
    job = tmp_path / "job.json"
    job.write_text(json.dumps(LONG_REQUEST), encoding="utf-8")
    home = tmp_path / "home"
    command = [sys.executable, "-m", "service.cli.main", "select", str(job), "--workers", "2"]
    proc = subprocess.Popen(
        command,
        cwd=tmp_path,
        env=server_env(home),
        stdin=subprocess.DEVNULL,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        start_new_session=True,  # a process group of its own, as a terminal's foreground job
        preexec_fn=_as_on_a_terminal,
    )
    try:
        store = home / "foldwise.sqlite"
        _wait_for_running_units(store, time.monotonic() + 90)
        if stop == "sigterm":
            elapsed = _gone_after_signal(proc, signal.SIGTERM, SELECT_STOP_GRACE)
        else:
            elapsed = _gone_after_signal(proc, signal.SIGINT, SELECT_STOP_GRACE, group=True)
        _, err = proc.communicate(timeout=10)
        print(f"select and its pool gone {elapsed:.1f} s after SIGTERM")
        assert elapsed <= SELECT_STOP_GRACE, f"took {elapsed:.1f} s"
        assert proc.returncode == 1
        assert err.decode().strip().endswith("interrupted; the job is marked cancelled.")
        assert "Traceback" not in err.decode()
        with sqlite3.connect(store) as con:
            assert [r[0] for r in con.execute("SELECT status FROM job")] == ["cancelled"]
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
