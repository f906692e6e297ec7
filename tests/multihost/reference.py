"""The embedded run of a request (`foldwise select --json`, SQLite, one local process), started in
the background so that it computes while the fault tests wait out leases and reconcile ticks."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from distributed.stack import REPO

# the request's own compute on a loaded two-core machine, with room
REFERENCE_SECONDS = 900


@dataclass
class Reference:
    """A running `foldwise select` and where its result v1 goes."""

    popen: subprocess.Popen[bytes]
    out: Path
    err: Path

    def result(self) -> dict[str, Any]:
        """Wait for the run and return its result v1."""
        code = self.popen.wait(timeout=REFERENCE_SECONDS)
        assert code == 0, f"the embedded run failed ({code}): {self.err.read_text()[-2000:]}"
        value: dict[str, Any] = json.loads(self.out.read_text())
        return value

    def stop(self) -> None:
        """End the run if it is still going (a module that failed early)."""
        if self.popen.poll() is None:
            os.killpg(self.popen.pid, signal.SIGKILL)
            self.popen.wait(timeout=10)


def start_reference(request: dict[str, Any], folder: Path) -> Reference:
    """Start `foldwise select REQUEST --json` on its own embedded home in `folder`."""
    path = folder / "request.json"
    path.write_text(json.dumps(request))
    out, err = folder / "result.json", folder / "select.log"
    env = {**os.environ, "FOLDWISE_HOME": str(folder / "home")}
    for name in ("FOLDWISE_DATABASE_URL", "FOLDWISE_BROKER_URL"):
        env.pop(name, None)  # the embedded default: SQLite and the local pool
    with out.open("wb") as stdout, err.open("wb") as stderr:
        popen = subprocess.Popen(
            [sys.executable, "-m", "service.cli.main", "select", str(path), "--json"],
            cwd=REPO,
            env=env,
            stdout=stdout,
            stderr=stderr,
            start_new_session=True,
        )
    return Reference(popen, out, err)
