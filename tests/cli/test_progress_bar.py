"""On a terminal, `foldwise select` draws a progress bar: units done of total, and time elapsed."""

from __future__ import annotations

import fcntl
import os
import pty
import re
import select
import struct
import subprocess
import termios
import time
from pathlib import Path
from typing import Any

from .runner import FOLDWISE, TIMEOUT, cli_env, write_job

OUTER_K, INNER_K, N_CANDIDATES = 3, 2, 6
# one inner unit per (scope, candidate) over outer_k + 1 scopes, one refit per outer fold, one final
UNITS = (OUTER_K + 1) * N_CANDIDATES + OUTER_K + 1


def _run_on_terminal(argv: list[str], *, cwd: Path, env: dict[str, str]) -> tuple[int, str]:
    """Run `argv` with stdin, stdout and stderr on a fresh pseudo-terminal; (code, output)."""
    master, slave = pty.openpty()
    # a wide window, so the bar's columns are not cut off
    fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", 50, 200, 0, 0))
    proc = subprocess.Popen(argv, cwd=cwd, env=env, stdin=slave, stdout=slave, stderr=slave)
    os.close(slave)
    chunks: list[bytes] = []
    deadline = time.monotonic() + TIMEOUT
    try:
        while time.monotonic() < deadline:
            ready, _, _ = select.select([master], [], [], 0.5)
            if ready:
                try:
                    data = os.read(master, 65536)
                except OSError:  # EIO: the child closed its side of the terminal
                    break
                if not data:
                    break
                chunks.append(data)
            elif proc.poll() is not None:
                break
        code = proc.wait(timeout=10)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        os.close(master)
    return code, b"".join(chunks).decode("utf-8", errors="replace")


def test_progress_bar_counts_units_on_a_terminal(
    workdir: Path, foldwise_home: Path, valid_request: dict[str, Any]
) -> None:
    request = valid_request
    request["families"] = [
        {"estimator": "KNeighborsClassifier", "grid": {"n_neighbors": list(range(1, 7))}}
    ]
    request["outer"]["k"], request["inner"]["k"] = OUTER_K, INNER_K
    assert len(request["families"][0]["grid"]["n_neighbors"]) == N_CANDIDATES
    write_job(workdir, request)
    env = cli_env(foldwise_home, TERM="xterm-256color", COLUMNS="200", LINES="50")
    for name in ("NO_COLOR", "FORCE_COLOR", "TTY_INTERACTIVE", "TTY_COMPATIBLE"):
        env.pop(name, None)
    code, output = _run_on_terminal([*FOLDWISE, "select", "job.json"], cwd=workdir, env=env)
    assert code == 0, output
    plain = re.sub(r"\x1b\[[0-9;?]*[A-Za-z]", "", output)  # drop colours and cursor moves
    counters = {(int(a), int(b)) for a, b in re.findall(r"\b(\d+)/(\d+)\b", plain)}
    assert any(total == UNITS and 0 < done <= UNITS for done, total in counters), plain[-2000:]
    assert "elapsed" in plain
    assert "Optimism gap" in plain  # the summary still follows the bar
