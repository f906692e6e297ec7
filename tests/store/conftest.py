"""Fixtures that give each store test a fresh database, on SQLite and on a real PostgreSQL.

PostgreSQL is the local server (127.0.0.1:5432, user postgres, trust auth). When it cannot be
reached the tests fail rather than skip: the distributed path runs on PostgreSQL, so a green run
without it would prove nothing about that path.
"""

from __future__ import annotations

import os
from collections.abc import Iterator

import pytest
from sqlalchemy import Engine

from service.store.db import make_engine, upgrade_database

BACKENDS = ("sqlite", "postgresql")


@pytest.fixture
def sqlite_url(tmp_path: os.PathLike[str]) -> str:
    # A folder that does not exist yet: make_engine must create it.
    return f"sqlite:///{tmp_path}/home/foldwise.sqlite"


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
