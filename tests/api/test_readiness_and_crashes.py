"""Readiness with a broker configured, and the catch-all 500 that keeps tracebacks private."""

from __future__ import annotations

import asyncio
from pathlib import Path

import httpx
import pytest
from fastapi import FastAPI

from service.api.app import create_app
from service.config import load_settings

from .server import free_port, running_server

REDIS_URL = "redis://127.0.0.1:6379/15"  # the build machine's local Redis (see .ci/run)


@pytest.mark.parametrize(
    ("broker", "status"),
    [(REDIS_URL, 200), (f"redis://127.0.0.1:{free_port()}/0", 503)],
    ids=["redis answers", "nothing listens"],
)
def test_readyz_pings_the_broker(tmp_path: Path, broker: str, status: int) -> None:
    with (
        running_server(
            tmp_path / "home", tmp_path / "server.log", FOLDWISE_BROKER_URL=broker
        ) as live,
        live.client() as client,
    ):
        answer = client.get("/readyz")
        alive = client.get("/healthz")
    assert alive.status_code == 200  # liveness does not depend on the broker
    assert answer.status_code == status
    if status == 200:
        assert answer.json()["checks"] == {"database": "ok", "broker": "ok"}
    else:
        assert answer.headers["content-type"] == "application/problem+json"
        problem = answer.json()
        assert problem["type"].endswith("/unavailable") and "broker" in problem["detail"]


def test_an_unexpected_error_is_a_500_problem_without_the_traceback(tmp_path: Path) -> None:
    # In-process on purpose: no live route fails on demand. The lifespan does not run here, so
    # no pool starts; the route added below needs none.
    app: FastAPI = create_app(load_settings({"FOLDWISE_HOME": str(tmp_path)}), local_workers=1)

    @app.get("/boom")
    def boom() -> None:
        raise RuntimeError("secret path /srv/private/data.csv")

    async def fetch() -> httpx.Response:
        transport = httpx.ASGITransport(app=app, raise_app_exceptions=False)
        async with httpx.AsyncClient(transport=transport, base_url="http://test") as client:
            return await client.get("/boom")

    answer = asyncio.run(fetch())
    assert answer.status_code == 500
    assert answer.headers["content-type"] == "application/problem+json"
    problem = answer.json()
    assert problem["type"].endswith("/internal")
    assert "secret" not in answer.text and "Traceback" not in answer.text
