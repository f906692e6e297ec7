"""Running the real `foldwise` console script and looking into the store it leaves.

CLI tests run `foldwise` as a subprocess, exactly as a user would, so exit codes, stdout, stderr
and the SQLite store are observed from outside. A subprocess costs one to two seconds of imports,
so the data is tiny and the families cheap, and catalogues of cheap refusals run the same command
in this process (`run_foldwise_in_process`) while a few of their cases still run as subprocesses.
"""

from __future__ import annotations

import copy
import json
import logging
import os
import random
import signal
import sqlite3
import subprocess
import sys
import traceback
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

REPO = Path(__file__).resolve().parents[2]
FOLDWISE = [sys.executable, "-m", "service.cli.main"]
DATA_NAME = "data.csv"
N_ROWS = 48  # 24 rows per label, 16 per grade
TIMEOUT = 180

# The shared table: two numbers, a categorical colour, a three-class grade and a binary label
# that depends on x1 (so the models learn something) with a little noise.
BASE_REQUEST: dict[str, Any] = {
    "dataset": {"path": DATA_NAME},
    "target": "label",
    "features": None,
    "task": "classification",
    "families": [
        {"estimator": "LogisticRegression", "fixed": {"max_iter": 500}, "grid": {"C": [0.1, 1.0]}},
        {"estimator": "KNeighborsClassifier", "grid": {"n_neighbors": [3, 5]}},
    ],
    "preprocess": "auto",
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 2, "seed": 1},
    "metrics": ["accuracy", "balanced_accuracy"],
    "pick_by": "accuracy",
}


@dataclass(frozen=True)
class Outcome:
    """What one run of the console script left behind."""

    code: int
    stdout: str
    stderr: str
    home: Path


def table_csv() -> str:
    """The shared small CSV, the same bytes on every call."""
    rng = random.Random(7)
    lines = ["x1,x2,colour,grade,label"]
    for i in range(N_ROWS):
        label = i % 2
        x1 = round(label * 1.5 + rng.gauss(0, 0.8), 3)
        x2 = round(rng.gauss(0, 1), 3)
        colour = ("red", "green", "blue")[i % 3]
        lines.append(f"{x1},{x2},{colour},{i % 3},{label}")
    return "\n".join(lines) + "\n"


def base_request() -> dict[str, Any]:
    """A fresh copy of the valid base request (its dataset path is relative to the run's cwd)."""
    return copy.deepcopy(BASE_REQUEST)


def write_job(folder: Path, request: Any, name: str = "job.json") -> Path:
    """Write a job request file into `folder`."""
    path = folder / name
    path.write_text(json.dumps(request), encoding="utf-8")
    return path


def cli_env(home: Path, **extra: str) -> dict[str, str]:
    """The process environment with the embedded default under `home` and nothing configured."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("FOLDWISE_")}
    env["FOLDWISE_HOME"] = str(home)
    # the checkout, so `python -m service.cli.main` imports this tree from any cwd
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
    env.update(extra)
    return env


def run_foldwise(*args: str, cwd: Path, home: Path | None = None) -> Outcome:
    """Run the real console script with `args` in `cwd`; the store lives in `home`."""
    home = home or cwd / "home"
    proc = subprocess.run(
        [*FOLDWISE, *args],
        cwd=cwd,
        env=cli_env(home),
        stdin=subprocess.DEVNULL,
        capture_output=True,
        text=True,
        timeout=TIMEOUT,
        check=False,
    )
    return Outcome(proc.returncode, proc.stdout, proc.stderr, home)


def store_jobs(home: Path) -> list[tuple[str, str]]:
    """(id, status) of every job in the embedded store under `home`; none if there is no store."""
    path = home / "foldwise.sqlite"
    if not path.exists():
        return []
    with sqlite3.connect(path) as con:
        tables = {row[0] for row in con.execute("SELECT name FROM sqlite_master")}
        if "job" not in tables:
            return []
        return list(con.execute("SELECT id, status FROM job"))


def store_count(home: Path, table: str, where: str = "1 = 1", params: tuple = ()) -> int:
    """Rows of `table` in the embedded store under `home` matching `where`."""
    with sqlite3.connect(home / "foldwise.sqlite") as con:
        return int(con.execute(f"SELECT COUNT(*) FROM {table} WHERE {where}", params).fetchone()[0])


class _StderrAtEmit(logging.Handler):
    """Log records to whatever sys.stderr is when they are emitted, as Python's last resort does
    in a process with no logging set up (here: the runner's captured stderr)."""

    def emit(self, record: logging.LogRecord) -> None:
        sys.stderr.write(self.format(record) + "\n")


def run_foldwise_in_process(*args: str, cwd: Path, env: dict[str, str]) -> Outcome:
    """Run `foldwise ARGS` inside this process, seen from outside as the console script is.

    For cases where what is under test is the command's answer, not the process start: a
    subprocess costs a second or two of imports per call. The command sees `env` as its whole
    FOLDWISE_* environment and `cwd` as its working directory; an exception that escapes is
    written to stderr as a traceback with exit code 1, and warnings and log records that a fresh
    process would print go to stderr too, so the checks on stderr are the same as for a
    subprocess. `tests/cli` keeps true subprocess cases for exit codes end to end.
    """
    from typer.testing import CliRunner

    from service.cli.main import app

    # variables this process has but the command must not see, removed for the call
    unset: dict[str, str | None] = {k: None for k in os.environ if k.startswith("FOLDWISE_")}
    overrides: dict[str, str | None] = {**unset, **env}
    root = logging.getLogger()
    handler = _StderrAtEmit(logging.WARNING)
    sigterm = signal.getsignal(signal.SIGTERM)  # `select` turns SIGTERM into Ctrl-C
    before = Path.cwd()
    os.chdir(cwd)
    root.addHandler(handler)
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("default")
            # ignored by default outside __main__ in a fresh interpreter
            for quiet in (DeprecationWarning, PendingDeprecationWarning, ImportWarning):
                warnings.simplefilter("ignore", quiet)
            result = CliRunner().invoke(app, list(args), env=overrides, catch_exceptions=True)
    finally:
        root.removeHandler(handler)
        signal.signal(signal.SIGTERM, sigterm)
        os.chdir(before)
    stderr = result.stderr
    stderr += "".join(
        warnings.formatwarning(w.message, w.category, w.filename, w.lineno) for w in caught
    )
    code = result.exit_code
    if result.exception is not None and not isinstance(result.exception, SystemExit):
        stderr += "".join(traceback.format_exception(result.exception))
        code = 1
    return Outcome(code, result.stdout, stderr, Path(env.get("FOLDWISE_HOME", cwd / "home")))
