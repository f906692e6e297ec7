"""`make demo` ends by itself off a terminal; on a terminal `foldwise demo` keeps serving pages."""

from __future__ import annotations

import contextlib
import os
import pty
import re
import select
import signal
import socket
import subprocess
import time
from collections.abc import Iterator
from pathlib import Path

import httpx
import pytest

from service.cli.local_server import free_port

from .runner import FOLDWISE, REPO

# the demo fits its whole search space once; on a loaded two-core machine that takes minutes
DEMO_SECONDS = 900
_ANSI = re.compile(r"\x1b\[[0-9;?]*[A-Za-z]")
_REPORT = re.compile(r"Report page: (http://127\.0\.0\.1:(\d+)/reports/jobs/([0-9a-f]{32}))")
_TOKEN = re.compile(r"Sign-in token \(team demo, read and submit\): (\S+)")


def _env(home: Path) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("FOLDWISE_")}
    env["FOLDWISE_HOME"] = str(home)
    return env


def _as_on_a_terminal() -> None:
    """SIGINT at its default, as a program run in the foreground of a terminal starts with.

    Under a test runner started as a background job (`make test &`, nohup, some CI runners) the
    shell has set SIGINT to be ignored, which every child inherits (POSIX); the demo would then
    never see the Ctrl-C this test sends.
    """
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def _listening(port: int) -> bool:
    with socket.socket() as probe:
        probe.settimeout(1)
        return probe.connect_ex(("127.0.0.1", port)) == 0


@pytest.fixture(scope="module")
def demo_home(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Path]:
    """One store for both runs: the second reuses the first one's fold scores."""
    yield tmp_path_factory.mktemp("demo-home")


@pytest.mark.slow
def test_make_demo_ends_by_itself_and_names_the_report_and_a_token(demo_home: Path) -> None:
    """Not a terminal (as in CI): the demo prints the page's address and a token, then exits."""
    done = subprocess.run(
        ["make", "demo"],
        cwd=REPO,
        env=_env(demo_home),
        stdin=subprocess.DEVNULL,
        capture_output=True,
        text=True,
        timeout=DEMO_SECONDS,
    )
    assert done.returncode == 0, done.stderr[-3000:]
    report = _REPORT.search(done.stdout)
    token = _TOKEN.search(done.stdout)
    assert report is not None and token is not None, done.stdout[-2000:]
    assert "foldwise demo --keep" in done.stdout
    assert not _listening(int(report.group(2)))  # the server went away with the demo


@pytest.mark.slow
def test_on_a_terminal_the_demo_keeps_serving_until_ctrl_c(demo_home: Path) -> None:
    """stdout a terminal, --port given: the report page answers the printed token; SIGINT ends."""
    port = free_port()
    leader, follower = pty.openpty()
    proc = subprocess.Popen(
        [*FOLDWISE, "demo", "--port", str(port)],
        cwd=REPO,
        env=_env(demo_home),
        stdin=subprocess.DEVNULL,
        stdout=follower,
        stderr=subprocess.DEVNULL,
        start_new_session=True,  # its own group, so a failed run can end the server it started
        preexec_fn=_as_on_a_terminal,
    )
    os.close(follower)
    text = ""
    try:
        deadline = time.monotonic() + DEMO_SECONDS
        while not (_REPORT.search(text) and _TOKEN.search(text)):
            assert proc.poll() is None, text[-2000:]
            assert time.monotonic() < deadline, text[-2000:]
            ready, _, _ = select.select([leader], [], [], 1.0)
            if ready:
                text += _ANSI.sub("", os.read(leader, 65536).decode(errors="replace"))
        report, token = _REPORT.search(text), _TOKEN.search(text)
        assert report is not None and token is not None
        assert int(report.group(2)) == port
        time.sleep(2)
        assert proc.poll() is None  # still serving after printing everything
        base = f"http://127.0.0.1:{port}"
        with httpx.Client(base_url=base, timeout=60) as client:
            signed = client.post(
                "/reports/sign-in",
                data={"token": token.group(1), "next": f"/reports/jobs/{report.group(3)}"},
                headers={"Origin": base},
            )
            assert signed.status_code == 303, signed.text
            page = client.get(f"/reports/jobs/{report.group(3)}")
        assert page.status_code == 200
        assert "Estimate on unseen data" in page.text
        proc.send_signal(signal.SIGINT)  # what Ctrl-C sends
        assert _read_until_exit(proc, leader, timeout=60) == 0
        assert not _listening(port)
    finally:
        # the demo and the server it started: nothing of a failed run may outlive the test
        with contextlib.suppress(ProcessLookupError):
            os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()
        os.close(leader)


def _read_until_exit(proc: subprocess.Popen[bytes], leader: int, timeout: float) -> int | None:
    """Keep reading the terminal, as a real one does, until the process ends or time is up.

    Left unread, the terminal's buffer fills with the server's last lines and its write blocks,
    so the process could never end.
    """
    deadline = time.monotonic() + timeout
    while proc.poll() is None and time.monotonic() < deadline:
        ready, _, _ = select.select([leader], [], [], 0.5)
        if ready:
            try:
                os.read(leader, 65536)
            except OSError:  # the other end closed: the process is on its way out
                break
    try:
        return proc.wait(timeout=max(0.1, deadline - time.monotonic()))
    except subprocess.TimeoutExpired:
        return None
