"""Fixtures shared across test folders: a fresh PostgreSQL database per test.

PostgreSQL is the local server (127.0.0.1:5432, user postgres, trust auth; `.ci/run` starts it).
When it cannot be reached the tests fail rather than skip: production runs on PostgreSQL, so a
green run without it would prove nothing about that path.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator

import psycopg
import pytest

PG_ADMIN = os.environ.get(
    "FOLDWISE_TEST_PG_ADMIN", "host=127.0.0.1 port=5432 user=postgres dbname=postgres"
)
PG_URL = os.environ.get("FOLDWISE_TEST_PG_URL", "postgresql+psycopg://postgres@127.0.0.1:5432")


@pytest.fixture
def postgresql_url() -> Iterator[str]:
    """The URL of a new, empty PostgreSQL database, dropped after the test."""
    name = f"foldwise_test_{uuid.uuid4().hex[:12]}"
    with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    try:
        yield f"{PG_URL}/{name}"
    finally:
        with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
            admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
