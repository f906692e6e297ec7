"""Start `foldwise serve` in a subprocess and wait until it answers /healthz.

`foldwise demo` and the tests start a local server the same way: spawn it on a free port, poll
/healthz until it answers (or the process exits, or the time is up), and on the way out stop it
with SIGTERM, then SIGKILL if it does not go within the grace. This is the one copy of that.
"""

from __future__ import annotations

import socket
import subprocess
import sys
import time
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

# how often /healthz is asked while the server starts, and how long one ask may take
POLL_SECONDS = 0.2
PROBE_SECONDS = 1.0
# how long a stopping server gets after SIGTERM before it is killed
STOP_SECONDS = 30.0
LOG_TAIL_CHARS = 2000


class ServerDidNotStart(RuntimeError):
    """The server exited, or did not answer /healthz in time; the message says which."""


@dataclass(frozen=True)
class LocalServer:
    """A started server process and the address it answers on."""

    base_url: str
    process: subprocess.Popen[bytes]


def free_port() -> int:
    """A TCP port nobody listens on right now (the server binds it a moment later)."""
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def answers_healthz(base_url: str) -> bool:
    """Whether GET {base_url}/healthz answers 200 within a second."""
    import httpx  # the CLI's other commands need no HTTP client

    try:
        return httpx.get(f"{base_url}/healthz", timeout=PROBE_SECONDS).status_code == 200
    except httpx.HTTPError:
        return False


def _log_tail(log_path: Path | None) -> str:
    if log_path is None or not log_path.exists():
        return ""
    return log_path.read_text(errors="replace")[-LOG_TAIL_CHARS:]


def wait_until_healthy(
    base_url: str,
    process: subprocess.Popen[bytes] | None,
    timeout: float,
    log_path: Path | None = None,
) -> None:
    """Poll /healthz until it answers; raise ServerDidNotStart if `process` exits or time is up."""
    deadline = time.monotonic() + timeout
    while True:
        if process is not None and process.poll() is not None:
            reason = f"the server exited with code {process.returncode}"
            break
        if answers_healthz(base_url):
            return
        if time.monotonic() > deadline:
            reason = f"the server did not answer /healthz within {timeout:.0f} s"
            break
        time.sleep(POLL_SECONDS)
    where = f"; see {log_path}" if log_path is not None else ""
    tail = _log_tail(log_path)
    raise ServerDidNotStart(f"{reason}{where}." + (f"\n{tail}" if tail else ""))


def stop(process: subprocess.Popen[bytes], grace: float = STOP_SECONDS) -> None:
    """SIGTERM, then SIGKILL if the process is still there after `grace` seconds."""
    if process.poll() is not None:
        return
    process.terminate()
    try:
        process.wait(timeout=grace)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait()


@contextmanager
def serving(
    port: int,
    log_path: Path,
    *,
    start_timeout: float,
    env: Mapping[str, str] | None = None,
    args: Sequence[str] = (),
    cwd: Path | None = None,
) -> Iterator[LocalServer]:
    """`python -m service.cli.main serve --port PORT ARGS` until the block ends, once healthy."""
    command = [sys.executable, "-m", "service.cli.main", "serve", "--port", str(port), *args]
    log_path.parent.mkdir(parents=True, exist_ok=True)
    with log_path.open("wb") as log:
        process = subprocess.Popen(
            command,
            env=dict(env) if env is not None else None,
            cwd=cwd,
            stdout=log,
            stderr=subprocess.STDOUT,
        )
    try:
        base_url = f"http://127.0.0.1:{port}"
        wait_until_healthy(base_url, process, start_timeout, log_path)
        yield LocalServer(base_url, process)
    finally:
        stop(process)
