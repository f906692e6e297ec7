"""Fixtures shared across test folders: a fresh PostgreSQL database per test, or per module.

PostgreSQL is the local server (127.0.0.1:5432, user postgres, trust auth; `.ci/run` starts it).
When it cannot be reached the tests fail rather than skip: production runs on PostgreSQL, so a
green run without it would prove nothing about that path.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator
from contextlib import contextmanager

import psycopg
import pytest

PG_ADMIN = os.environ.get(
    "FOLDWISE_TEST_PG_ADMIN", "host=127.0.0.1 port=5432 user=postgres dbname=postgres"
)
PG_URL = os.environ.get("FOLDWISE_TEST_PG_URL", "postgresql+psycopg://postgres@127.0.0.1:5432")


@contextmanager
def new_database() -> Iterator[str]:
    """The URL of a new, empty PostgreSQL database, dropped on leaving (open connections too)."""
    name = f"foldwise_test_{uuid.uuid4().hex[:12]}"
    with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    try:
        yield f"{PG_URL}/{name}"
    finally:
        with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
            admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


@pytest.fixture
def postgresql_url() -> Iterator[str]:
    """The URL of a new, empty PostgreSQL database, dropped after the test."""
    with new_database() as url:
        yield url


@pytest.fixture(scope="module")
def module_postgresql_url() -> Iterator[str]:
    """A new, empty PostgreSQL database the module's tests share, dropped after the module."""
    with new_database() as url:
        yield url
