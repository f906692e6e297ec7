"""A live server on either store: the embedded SQLite default or a fresh PostgreSQL database.

PostgreSQL is the local server the shared conftest uses (127.0.0.1:5432, user postgres, trust);
the database is made here for a whole module (the shared fixture makes one per test) and migrated
before the server starts, as `foldwise db upgrade` would be run in a deployment.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import psycopg

from service.store.db import upgrade_database

from .server import Server, running_server

PG_ADMIN = os.environ.get(
    "FOLDWISE_TEST_PG_ADMIN", "host=127.0.0.1 port=5432 user=postgres dbname=postgres"
)
PG_URL = os.environ.get("FOLDWISE_TEST_PG_URL", "postgresql+psycopg://postgres@127.0.0.1:5432")
STORES = ("sqlite", "postgresql")


@contextmanager
def store_env(store: str) -> Iterator[dict[str, str]]:
    """Extra server environment for `store`; a PostgreSQL database lives until the block ends."""
    if store == "sqlite":
        yield {}
        return
    name = f"foldwise_test_{uuid.uuid4().hex[:12]}"
    with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    try:
        url = f"{PG_URL}/{name}"
        upgrade_database(url)
        yield {"FOLDWISE_DATABASE_URL": url}
    finally:
        with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
            admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


@contextmanager
def server_on(store: str, home: Path, **extra: str) -> Iterator[Server]:
    """A live `foldwise serve` (local pool of two) on `store`, its home under `home`."""
    with (
        store_env(store) as env,
        running_server(
            home, home.parent / f"{home.name}.log", FOLDWISE_LOCAL_WORKERS="2", **env, **extra
        ) as live,
    ):
        yield live
