"""Fixtures for the engine tests."""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator
from pathlib import Path

import psycopg
import pytest
from threadpoolctl import threadpool_limits

from service.config import Settings, load_settings


@pytest.fixture
def settings(tmp_path: Path) -> Settings:
    """Settings for a fresh embedded home (SQLite store) under the test's temporary folder."""
    return load_settings({"FOLDWISE_HOME": str(tmp_path / "home")})


@pytest.fixture(autouse=True, scope="session")
def one_blas_thread() -> Iterator[None]:
    """One BLAS/OpenMP thread, as the pool children use: on two shared cores, small fits spend
    more time handing work between threads than computing. Engine and reference both run under
    it, so agreement checks compare like with like."""
    with threadpool_limits(1):
        yield


# the server tests/conftest.py makes its databases on (same variables, same defaults)
PG_ADMIN = os.environ.get(
    "FOLDWISE_TEST_PG_ADMIN", "host=127.0.0.1 port=5432 user=postgres dbname=postgres"
)
PG_URL = os.environ.get("FOLDWISE_TEST_PG_URL", "postgresql+psycopg://postgres@127.0.0.1:5432")


@pytest.fixture(scope="module", params=["sqlite", "postgresql"])
def module_store(
    request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory
) -> Settings:
    """Settings of one store per module and kind, for modules that run a few jobs in a row on
    it: an embedded home, with a PostgreSQL database of its own for the second kind."""
    env = {"FOLDWISE_HOME": str(tmp_path_factory.mktemp("home") / "home")}
    if request.param == "postgresql":
        # made and dropped as tests/conftest.py does
        name = f"foldwise_test_{uuid.uuid4().hex[:12]}"
        with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
            admin.execute(f'CREATE DATABASE "{name}"')

        def drop() -> None:
            with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
                admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')

        request.addfinalizer(drop)
        env["FOLDWISE_DATABASE_URL"] = f"{PG_URL}/{name}"
    return load_settings(env)
