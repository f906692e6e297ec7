"""Fixtures that give each store test a fresh database, on SQLite and on a real PostgreSQL.

PostgreSQL is the local server (127.0.0.1:5432, user postgres, trust auth). When it cannot be
reached the tests fail rather than skip: the distributed path runs on PostgreSQL, so a green run
without it would prove nothing about that path.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator

import psycopg
import pytest
from sqlalchemy import Engine

from service.store.db import make_engine, upgrade_database

PG_ADMIN = os.environ.get(
    "FOLDWISE_TEST_PG_ADMIN", "host=127.0.0.1 port=5432 user=postgres dbname=postgres"
)
PG_URL = os.environ.get("FOLDWISE_TEST_PG_URL", "postgresql+psycopg://postgres@127.0.0.1:5432")
BACKENDS = ("sqlite", "postgresql")


@pytest.fixture
def sqlite_url(tmp_path: os.PathLike[str]) -> str:
    # A folder that does not exist yet: make_engine must create it.
    return f"sqlite:///{tmp_path}/home/foldwise.sqlite"


@pytest.fixture
def postgresql_url() -> Iterator[str]:
    name = f"foldwise_test_{uuid.uuid4().hex[:12]}"
    with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    try:
        yield f"{PG_URL}/{name}"
    finally:
        with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
            admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


@pytest.fixture(params=BACKENDS)
def empty_url(request: pytest.FixtureRequest) -> str:
    """The URL of an empty database, once per backend."""
    return str(request.getfixturevalue(f"{request.param}_url"))


@pytest.fixture
def db_url(empty_url: str) -> str:
    """The URL of a database migrated to head, once per backend."""
    upgrade_database(empty_url)
    return empty_url


@pytest.fixture
def engine(db_url: str) -> Iterator[Engine]:
    engine = make_engine(db_url)
    try:
        yield engine
    finally:
        engine.dispose()
