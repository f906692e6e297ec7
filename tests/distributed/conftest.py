"""Fixtures for the distributed path: PostgreSQL, a private Redis database, real processes."""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest
import redis

from service.config import load_settings
from service.jobs.local.driver import run_embedded

from .stack import REPO, Stack, deploy, start_workers_and_beat

REDIS_HOST, REDIS_PORT = "127.0.0.1", 6379
# Every time setting stays at its default (unit time limit, lease, heartbeat, reconcile period,
# republish delay): the tests see what an operator gets.


@pytest.fixture
def redis_url() -> Iterator[str]:
    """A Redis database number no other running test holds, empty before and after."""
    admin = redis.Redis(REDIS_HOST, REDIS_PORT, db=0)
    claimed = None
    # db 0 is left to people; a key there with an expiry claims a number, so concurrent test
    # runs (and a crashed one, once its key expires) never share a database
    for number in range(1, 16):
        if admin.set(f"foldwise-test:redis-db:{number}", "1", nx=True, ex=1800):
            claimed = number
            break
    if claimed is None:
        pytest.fail("every Redis database 1-15 is claimed by another test run")
    database = redis.Redis(REDIS_HOST, REDIS_PORT, db=claimed)
    database.flushdb()
    try:
        yield f"redis://{REDIS_HOST}:{REDIS_PORT}/{claimed}"
    finally:
        database.flushdb()
        database.close()
        admin.delete(f"foldwise-test:redis-db:{claimed}")
        admin.close()


@pytest.fixture
def stack(tmp_path: Path, postgresql_url: str, redis_url: str) -> Iterator[Stack]:
    """A migrated store and the environment every process of this deployment shares."""
    home = tmp_path / "home"
    env = {
        "FOLDWISE_HOME": str(home),
        "FOLDWISE_DATABASE_URL": postgresql_url,
        "FOLDWISE_BROKER_URL": redis_url,
    }
    deployment = deploy(env, home)
    try:
        yield deployment
    finally:
        deployment.stop()


@pytest.fixture
def running_stack(stack: Stack) -> Stack:
    """Two workers (one pool process each) and one beat, all ready."""
    return start_workers_and_beat(stack)


_REFERENCE: dict[str, dict[str, Any]] = {}


@pytest.fixture(scope="session")
def embedded_result(
    tmp_path_factory: pytest.TempPathFactory,
) -> Callable[[dict[str, Any]], dict[str, Any]]:
    """The embedded run's result for a request, on its own SQLite home (once per request)."""

    def run(request: dict[str, Any]) -> dict[str, Any]:
        key = json.dumps(request, sort_keys=True)
        if key not in _REFERENCE:
            home = tmp_path_factory.mktemp("embedded")
            settings = load_settings({"FOLDWISE_HOME": str(home)})
            _REFERENCE[key] = run_embedded(
                request, settings=settings, workers=1, base_dir=REPO
            ).result
        return _REFERENCE[key]

    return run
