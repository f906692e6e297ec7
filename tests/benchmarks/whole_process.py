"""Timing foldwise and scikit-learn as whole processes, the way a user starts them.

Shared by the benchmarks that compare whole runs (bench_select.py, bench_fixed_costs.py), so
both start the same command in the same environment and time it the same way.
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path


def clean_env(home: Path | None = None) -> dict[str, str]:
    """The embedded default on both sides: no configured database, broker or data roots."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("FOLDWISE_")}
    if home is not None:
        env["FOLDWISE_HOME"] = str(home)
    return env


def foldwise_command() -> list[str]:
    """The installed console script beside this interpreter, else the module."""
    script = Path(sys.executable).with_name("foldwise")
    return [str(script)] if script.exists() else [sys.executable, "-m", "service.cli.main"]


def timed(
    command: list[str], *, env: dict[str, str], cwd: Path, timeout: float
) -> tuple[float, str]:
    """(wall seconds, stdout) of one run; a failed run ends the benchmark with its stderr."""
    started = time.perf_counter()
    done = subprocess.run(
        command, env=env, cwd=cwd, capture_output=True, text=True, timeout=timeout
    )
    seconds = time.perf_counter() - started
    if done.returncode != 0:
        sys.exit(f"{' '.join(command)} exited {done.returncode}:\n{done.stderr[-3000:]}")
    return seconds, done.stdout
