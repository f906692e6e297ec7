"""service/cli/local_server.py: the one way the demo and the tests start a server and wait for it.

A server that answers /healthz is handed over and stopped at the end of the block; one that exits
while starting is reported at once with its exit code and the end of its log, not after the
start timeout.
"""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from service.cli.local_server import ServerDidNotStart, answers_healthz, free_port, serving

from .runner import REPO, cli_env

# as generous as the other live-server tests: importing scikit-learn on a busy 2-core machine
START_TIMEOUT = 120.0


def test_a_server_is_handed_over_once_it_answers_and_stopped_after(tmp_path: Path) -> None:
    env = cli_env(tmp_path / "home", FOLDWISE_LOCAL_WORKERS="1")
    log = tmp_path / "server.log"
    with serving(free_port(), log, start_timeout=START_TIMEOUT, env=env, cwd=REPO) as server:
        assert answers_healthz(server.base_url)
        assert server.process.poll() is None
    assert server.process.poll() is not None  # stopped with the block
    assert not answers_healthz(server.base_url)


def test_a_server_that_exits_while_starting_is_reported_at_once(tmp_path: Path) -> None:
    env = cli_env(tmp_path / "home")
    log = tmp_path / "server.log"
    started = time.monotonic()
    with (
        pytest.raises(ServerDidNotStart) as refused,
        serving(
            free_port(),
            log,
            start_timeout=START_TIMEOUT,
            env=env,
            cwd=REPO,
            args=("--workers-local", "0"),
        ),
    ):
        pytest.fail("the block must not run for a server that never answered")
    message = str(refused.value)
    assert message.startswith("the server exited with code 2; see ")
    assert str(log) in message and "--workers-local" in message  # the log's last words
    assert time.monotonic() - started < START_TIMEOUT


def test_nothing_listening_does_not_answer() -> None:
    assert not answers_healthz(f"http://127.0.0.1:{free_port()}")
