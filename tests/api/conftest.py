"""Fixtures for the REST API tests: one live server for the folder, tokens, a finished job.

The server and its pool are package-scoped, not session-scoped: a session fixture lives until
the last test of the whole run, so the idle server and its pool processes would keep taking CPU
and memory from every later folder's tests on the two shared cores.
"""

from __future__ import annotations

import copy
import uuid
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from .server import IRIS_REQUEST, Server, running_server

MAX_COLUMNS = 40


@pytest.fixture(scope="package")
def data_root(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The one folder the server may read files from."""
    return tmp_path_factory.mktemp("data-root")


@pytest.fixture(scope="package")
def server(tmp_path_factory: pytest.TempPathFactory, data_root: Path) -> Iterator[Server]:
    """The embedded server with a data root, a 1 MiB upload cap and a 40-column cap."""
    home = tmp_path_factory.mktemp("home")
    with running_server(
        home,
        home.parent / "server.log",
        FOLDWISE_DATA_ROOTS=str(data_root),
        FOLDWISE_MAX_UPLOAD_MB="1",
        FOLDWISE_MAX_COLUMNS=str(MAX_COLUMNS),
        FOLDWISE_LOCAL_WORKERS="2",
    ) as live:
        yield live


@pytest.fixture
def team() -> str:
    """A team of its own for each test, so no test sees another's jobs."""
    return f"team-{uuid.uuid4().hex[:8]}"


@pytest.fixture
def token(server: Server, team: str) -> str:
    """A submit+read token for the test's team."""
    return server.token(team)


@pytest.fixture
def iris_request() -> dict[str, Any]:
    """A fresh copy of the small valid request on the iris sample."""
    return copy.deepcopy(IRIS_REQUEST)


@pytest.fixture(scope="package")
def finished_job(server: Server) -> dict[str, Any]:
    """The iris job submitted over HTTP by team 'owners' and followed until it ended."""
    token = server.token("owners")
    with server.client(token) as client:
        answer = client.post("/v1/jobs", json=copy.deepcopy(IRIS_REQUEST))
        assert answer.status_code == 202, answer.text
        job = server.wait_for_job(client, answer.json()["id"])
    assert job["status"] == "succeeded", job["error"]
    return {"job": job, "token": token}
