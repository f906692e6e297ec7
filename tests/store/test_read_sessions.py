"""Reading sessions take no write lock on SQLite; API connections end idle transactions."""

from __future__ import annotations

import time
from pathlib import Path

from sqlalchemy import func, select, text

from service.store.db import (
    make_engine,
    make_read_session_factory,
    make_session_factory,
    upgrade_database,
)
from service.store.models import ApiToken


def test_a_read_does_not_wait_for_the_writer(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    upgrade_database(url)
    engine = make_engine(url)  # the default 30 s busy timeout: a waiting read would show
    try:
        writer = make_session_factory(engine)()
        writer.execute(text("DELETE FROM api_token"))  # BEGIN IMMEDIATE: holds the write lock
        started = time.monotonic()
        with make_read_session_factory(engine)() as reader:
            count = reader.scalar(select(func.count()).select_from(ApiToken))
            mode = reader.execute(text("PRAGMA journal_mode")).scalar()
        waited = time.monotonic() - started
        writer.rollback()
        writer.close()
        assert mode == "wal" and count == 0
        assert waited < 1.0, f"the read waited {waited:.1f} s for the write lock"
        # and a writing session still queues behind the lock (it begins IMMEDIATE)
        first = make_session_factory(engine)()
        first.execute(text("DELETE FROM api_token"))
        second_engine = make_engine(url, busy_timeout_ms=200)
        try:
            with make_session_factory(second_engine)() as second:
                try:
                    second.execute(text("SELECT 1"))
                    raised = False
                except Exception as exc:  # "database is locked" after its busy timeout
                    raised = "locked" in str(exc)
            assert raised
        finally:
            first.rollback()
            first.close()
            second_engine.dispose()
    finally:
        engine.dispose()


def test_api_connections_end_idle_transactions(postgresql_url: str) -> None:
    engine = make_engine(postgresql_url, pool_size=4, max_overflow=4)
    try:
        with engine.connect() as connection:
            timeout = connection.execute(text("SHOW idle_in_transaction_session_timeout"))
            assert timeout.scalar() == "1min"
        assert engine.pool.size() == 4  # type: ignore[attr-defined]
    finally:
        engine.dispose()
