"""Engine tuning: SQLite pragmas and immediate write locks, foreign keys, fork safety."""

from __future__ import annotations

import os
import threading
import time
from pathlib import Path

import pytest
from sqlalchemy import Engine, select, text
from sqlalchemy.exc import IntegrityError, OperationalError

from service.store.db import dispose_after_fork, make_engine, make_session_factory, upgrade_database

from .rows import add_job


def test_sqlite_creates_the_folder_and_sets_its_pragmas(sqlite_url: str) -> None:
    engine = make_engine(sqlite_url)
    try:
        with engine.connect() as connection:
            assert connection.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
            assert connection.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
            assert connection.exec_driver_sql("PRAGMA busy_timeout").scalar() == 30_000
        assert Path(engine.url.database or "").is_file()
    finally:
        engine.dispose()


def test_foreign_keys_are_enforced(engine: Engine) -> None:
    sessions = make_session_factory(engine)
    with sessions.begin() as session:
        add_job(session)
    with pytest.raises(IntegrityError), sessions.begin() as session:
        add_job(session, dataset_hash="0" * 64)


def test_sqlite_transactions_take_the_write_lock_at_begin(sqlite_url: str) -> None:
    upgrade_database(sqlite_url)
    holder = make_engine(sqlite_url)
    waiter = make_engine(sqlite_url, busy_timeout_ms=100)
    try:
        # Open the waiter's pooled connection first, so what times out below is its BEGIN and
        # not the pragmas run on connect.
        with waiter.connect() as second:
            second.rollback()
        with holder.connect() as first:
            # Only a read: a deferred BEGIN would take no write lock and the waiter would pass.
            first.execute(select(1))
            started = time.monotonic()
            with pytest.raises(OperationalError, match="locked"), waiter.connect() as second:
                second.execute(select(1))
            assert time.monotonic() - started >= 0.09  # it waited out its busy timeout
        with waiter.connect() as second:
            assert second.execute(select(1)).scalar() == 1
    finally:
        holder.dispose()
        waiter.dispose()


def test_sqlite_second_writer_waits_for_the_first(sqlite_url: str) -> None:
    upgrade_database(sqlite_url)
    engine = make_engine(sqlite_url)
    locked = threading.Event()

    def hold_briefly() -> None:
        with engine.begin() as connection:
            connection.execute(select(1))
            locked.set()
            time.sleep(0.3)

    try:
        thread = threading.Thread(target=hold_briefly)
        thread.start()
        assert locked.wait(5)
        started = time.monotonic()
        with engine.begin() as connection:  # the default 30 s busy timeout outlasts the holder
            connection.execute(text("UPDATE job SET units_done = units_done + 1"))
        thread.join()
        assert time.monotonic() - started >= 0.2
    finally:
        engine.dispose()


@pytest.mark.skipif(not hasattr(os, "fork"), reason="needs os.fork")
def test_forked_child_gets_its_own_connections(engine: Engine) -> None:
    with engine.connect() as connection:
        connection.execute(select(1))  # leave a pooled connection the child inherits
    pid = os.fork()
    if pid == 0:  # the child: must never return into pytest
        status = 1
        try:
            dispose_after_fork(engine)
            with engine.connect() as connection:
                status = 0 if connection.execute(select(1)).scalar() == 1 else 1
        finally:
            os._exit(status)
    _, status = os.waitpid(pid, 0)
    assert os.waitstatus_to_exitcode(status) == 0
    # The parent's pooled connection survived the child's dispose.
    with engine.connect() as connection:
        assert connection.execute(select(1)).scalar() == 1
