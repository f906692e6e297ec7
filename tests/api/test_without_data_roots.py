"""A server with no FOLDWISE_DATA_ROOTS reads no files by path, whatever the path."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest

from .server import IRIS_REQUEST, Server, running_server

PUMPS = Path(__file__).resolve().parents[2] / "demo_data" / "pump_failures.csv"


@pytest.fixture(scope="module")
def rootless(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Server]:
    home = tmp_path_factory.mktemp("rootless")
    with running_server(home, home.parent / "rootless.log", FOLDWISE_LOCAL_WORKERS="1") as live:
        yield live


@pytest.mark.parametrize("path", [str(PUMPS), "pump_failures.csv", "/etc/passwd"])
def test_path_sources_are_refused_with_a_way_forward(rootless: Server, path: str) -> None:
    token = rootless.token("rootless")
    before = rootless.snapshot()
    with rootless.client(token) as client:
        register = client.post("/v1/datasets", json={"path": path})
        job = client.post("/v1/jobs", json=IRIS_REQUEST | {"dataset": {"path": path}})
    for answer in (register, job):
        assert answer.status_code == 422
        assert answer.headers["content-type"] == "application/problem+json"
        problem = answer.json()
        assert problem["field"] == "dataset.path"
        assert "FOLDWISE_DATA_ROOTS is not set" in problem["detail"]
    assert "/v1/datasets/upload" in register.json()["detail"]
    assert "content_hash" in job.json()["detail"]
    assert rootless.snapshot() == before


def test_samples_and_uploads_still_work(rootless: Server) -> None:
    with rootless.client(rootless.token("rootless")) as client:
        sample = client.post("/v1/datasets", json={"sample": "iris"})
        upload = client.post(
            "/v1/datasets/upload", files={"file": ("pumps.csv", PUMPS.read_bytes())}
        )
    assert sample.status_code == 201
    assert upload.status_code == 201 and upload.json()["n_rows"] == 1500
