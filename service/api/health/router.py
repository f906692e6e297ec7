"""Probes for the process manager and the load balancer, and metrics for Prometheus.

Unauthenticated on purpose: probes and scrapers carry no tokens, and nothing here names a team,
a dataset or a job.
"""

from __future__ import annotations

import logging

import anyio
import anyio.to_thread
from fastapi import APIRouter, Request
from fastapi.responses import PlainTextResponse
from pydantic import BaseModel
from sqlalchemy import text
from sqlalchemy.orm import Session, sessionmaker

from service.api.health.metrics import CONTENT_TYPE, render_metrics
from service.http.deps import SessionsDep, SettingsDep
from service.http.json_body import StrictJsonRoute
from service.http.problems import ProblemError, problem_responses

log = logging.getLogger(__name__)
router = APIRouter(tags=["health"], route_class=StrictJsonRoute)
BROKER_TIMEOUT_SECONDS = 2.0
PROBE_TIMEOUT_SECONDS = 2.0
_probe_limiter: anyio.CapacityLimiter | None = None


def _probe_threads() -> anyio.CapacityLimiter:
    """Two threads for probes, apart from the request pool (made on the server's event loop)."""
    global _probe_limiter
    if _probe_limiter is None:
        _probe_limiter = anyio.CapacityLimiter(2)
    return _probe_limiter


def _ping_store(sessions: sessionmaker[Session]) -> None:
    with sessions() as session:
        session.execute(text("SELECT 1"))


class Health(BaseModel):
    """The probe's verdict and what was checked."""

    status: str
    checks: dict[str, str]


@router.get("/healthz", response_model=Health, summary="Liveness: the process answers")
async def healthz() -> Health:
    """Always ok while the process can answer: no thread, no store, so load cannot delay it."""
    return Health(status="ok", checks={})


def _ping_broker(url: str) -> None:
    # Imported here for start-up speed: only a server with a broker pings one, and the broker
    # clients are slow to import.
    if url.startswith(("redis://", "rediss://", "unix://")):
        import redis

        client = redis.Redis.from_url(
            url,
            socket_connect_timeout=BROKER_TIMEOUT_SECONDS,
            socket_timeout=BROKER_TIMEOUT_SECONDS,
        )
        try:
            client.ping()
        finally:
            client.close()
        return
    from kombu import Connection

    with Connection(url, connect_timeout=BROKER_TIMEOUT_SECONDS) as connection:
        connection.ensure_connection(max_retries=1, timeout=BROKER_TIMEOUT_SECONDS)


@router.get(
    "/readyz",
    response_model=Health,
    summary="Readiness: the store answers, and the broker when one is configured",
    responses=problem_responses(503),
)
async def readyz(request: Request, sessions: SessionsDep, settings: SettingsDep) -> Health:
    """200 when every dependency answers; a 503 problem naming the one that does not."""
    checks: dict[str, str] = {}
    roles = getattr(request.app.state, "sql_roles", None)
    if settings.sql_connections and roles is not None:
        # a warning, not unreadiness: the reads are confined either way (service/datasets/sql_*)
        checks["sql_connections"] = roles.summary()
    try:
        # Threads of its own and a deadline: a busy request pool must not keep the probe waiting.
        with anyio.fail_after(PROBE_TIMEOUT_SECONDS):
            await anyio.to_thread.run_sync(
                _ping_store, sessions, limiter=_probe_threads(), abandon_on_cancel=True
            )
        checks["database"] = "ok"
    except Exception as exc:
        log.warning("readiness: database unreachable: %s", exc)
        raise ProblemError(
            503, "the database does not answer; check FOLDWISE_DATABASE_URL."
        ) from exc
    if settings.broker_url:
        try:
            await anyio.to_thread.run_sync(
                _ping_broker, settings.broker_url, limiter=_probe_threads()
            )
            checks["broker"] = "ok"
        except Exception as exc:
            log.warning("readiness: broker unreachable: %s", exc)
            raise ProblemError(
                503, "the broker does not answer; check FOLDWISE_BROKER_URL and that Redis runs."
            ) from exc
    return Health(status="ok", checks=checks)


@router.get(
    "/metrics",
    response_class=PlainTextResponse,
    response_model=None,
    summary="Prometheus metrics: jobs by status, units done, unit durations, queue depth",
    responses={
        200: {
            "description": "Prometheus text exposition format 0.0.4.",
            "content": {"text/plain": {"schema": {"type": "string"}}},
        }
    },
)
def metrics(sessions: SessionsDep) -> PlainTextResponse:
    """Read from the store at every scrape."""
    with sessions() as session:
        body = render_metrics(session)
    return PlainTextResponse(body, media_type=CONTENT_TYPE)
