"""Fixtures for the distributed path: PostgreSQL, a private Redis database, real processes.

A test that kills a worker or the beat, flushes the broker or needs processes started its own way
takes a stack of its own (`running_stack`, or `stack` to start them itself). Every other test
takes `shared_stack`: one deployment, two workers and one beat for the whole module, which saves
a start (10-23 s) per test; its tests' checks are per job, and their requests share no folds
unless reuse across jobs is what they check.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest

from service.config import load_settings
from service.jobs.local.driver import run_embedded

from .redis_claim import claimed_database
from .shared_stack import hand_over
from .stack import REPO, Stack, deploy, start_workers_and_beat

# Every time setting stays at its default (unit time limit, lease, heartbeat, reconcile period,
# republish delay): the tests see what an operator gets.


@pytest.fixture
def redis_url() -> Iterator[str]:
    """A Redis database number no other running test holds, empty before and after."""
    with claimed_database() as url:
        yield url


@pytest.fixture(scope="module")
def module_redis_url() -> Iterator[str]:
    """A claimed Redis database the module's tests share, empty before and after the module."""
    with claimed_database() as url:
        yield url


@contextmanager
def _deployment(home: Path, database_url: str, broker_url: str) -> Iterator[Stack]:
    """A migrated store and the environment every process of the deployment shares."""
    env = {
        "FOLDWISE_HOME": str(home),
        "FOLDWISE_DATABASE_URL": database_url,
        "FOLDWISE_BROKER_URL": broker_url,
    }
    deployment = deploy(env, home)
    try:
        yield deployment
    finally:
        deployment.stop()


@pytest.fixture
def stack(tmp_path: Path, postgresql_url: str, redis_url: str) -> Iterator[Stack]:
    """This test's own migrated store and environment; no processes yet."""
    with _deployment(tmp_path / "home", postgresql_url, redis_url) as deployment:
        yield deployment


@pytest.fixture
def running_stack(stack: Stack) -> Stack:
    """Two workers (one pool process each) and one beat of this test's own, all ready."""
    return start_workers_and_beat(stack)


@pytest.fixture(scope="module")
def module_running_stack(
    tmp_path_factory: pytest.TempPathFactory, module_postgresql_url: str, module_redis_url: str
) -> Iterator[Stack]:
    """Two workers and one beat on a store and broker of the module's, all ready."""
    home = tmp_path_factory.mktemp("stack") / "home"
    with _deployment(home, module_postgresql_url, module_redis_url) as deployment:
        yield start_workers_and_beat(deployment)


@pytest.fixture
def shared_stack(module_running_stack: Stack) -> Stack:
    """The module's running stack, once every earlier test's work on it has ended."""
    return hand_over(module_running_stack)


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
