"""Running a sql source's one statement at the driver and fetching its rows under the caps.

Why the driver and not SQLAlchemy's `text()`: the guarantee that a second statement is refused
lives in the driver. psycopg 3 declares a named (server-side) cursor with `force_extended=True`,
i.e. through PostgreSQL's extended query protocol, whose Parse message "cannot include more than
one SQL statement" (PostgreSQL manual, Message Flow, Extended Query); and `DECLARE ... CURSOR FOR`
accepts only a SELECT or VALUES. Python's sqlite3 refuses a second statement in one `execute`
("You can only execute one statement at a time"), and an authorizer lets a statement read only.

Rows are counted one at a time as they arrive (PostgreSQL: FETCH in libpq's single-row mode;
SQLite: one step per row), so the caps hold while fetching, not after: at most one row past a cap
is ever read, and a row cannot be larger than PostgreSQL's 1 GB field limit.
"""

from __future__ import annotations

import sqlite3
import time
from collections.abc import Generator, Iterator
from typing import TYPE_CHECKING, Any, cast

from sqlalchemy import Connection
from sqlalchemy.exc import SQLAlchemyError

from service.errors import BadInput

if TYPE_CHECKING:
    import psycopg

STATEMENT_TIMEOUT_MS = 120_000
CURSOR = "foldwise_source"
# what one number, date or boolean is counted as; text and bytes count their length
SCALAR_BYTES = 8


def driver_errors() -> tuple[type[Exception], ...]:
    """What the drivers raise for a statement the database refused."""
    # imported here for start-up speed: only a sql source on PostgreSQL needs psycopg loaded
    import psycopg

    return (SQLAlchemyError, psycopg.Error, sqlite3.Error)


# sqlite3 authorizer actions a plain SELECT needs (SQLite C API, "Authorizer Action Codes");
# everything else (writes, PRAGMA, ATTACH, transactions) is denied before the statement runs
_SQLITE_READS = {
    sqlite3.SQLITE_SELECT,
    sqlite3.SQLITE_READ,
    sqlite3.SQLITE_FUNCTION,
    sqlite3.SQLITE_RECURSIVE,
}


def row_bytes(row: Any) -> int:
    """What a row counts against FOLDWISE_SQL_MAX_MB: text and bytes by length, else 8 each."""
    return sum(
        len(v) if isinstance(v, (str, bytes, bytearray, memoryview)) else SCALAR_BYTES for v in row
    )


def _too_many_rows(max_rows: int) -> str:
    return (
        f"returns more than {max_rows} rows (FOLDWISE_SQL_MAX_ROWS); select fewer rows in the "
        "query."
    )


def _too_many_bytes(max_bytes: int) -> str:
    mb = max_bytes / (1024 * 1024)
    return (
        f"returns more than {mb:g} MB of values (FOLDWISE_SQL_MAX_MB); select fewer rows or "
        "leave out large columns."
    )


def _collect(
    rows: Iterator[Any], *, max_rows: int, max_bytes: int, field: str
) -> list[tuple[Any, ...]]:
    kept: list[tuple[Any, ...]] = []
    used = 0
    deadline = time.monotonic() + STATEMENT_TIMEOUT_MS / 1000
    for row in rows:
        used += row_bytes(row)
        if used > max_bytes:
            raise BadInput(field, _too_many_bytes(max_bytes))
        kept.append(tuple(row))
        if len(kept) > max_rows:
            raise BadInput(field, _too_many_rows(max_rows))
        # the statement timeout covers the DECLARE and the FETCH; this covers the reading too
        if len(kept) % 1000 == 0 and time.monotonic() > deadline:
            raise BadInput(
                field,
                f"took longer than {STATEMENT_TIMEOUT_MS // 1000} s to read; select fewer rows.",
            )
    return kept


def _read_postgresql(
    driver: psycopg.Connection[Any], statement: str, max_rows: int, max_bytes: int, field: str
) -> tuple[list[str], list[tuple[Any, ...]]]:
    # DECLARE through the extended protocol: one statement, and only a SELECT or VALUES
    with driver.cursor(name=CURSOR) as declared:
        declared.execute(statement)
        columns = [column.name for column in declared.description or []]
        # then FETCH in single-row mode: each row is counted as it arrives, and leaving early
        # cancels the rest (psycopg's Cursor.stream), so at most one row past a cap is held
        with driver.cursor() as reader:
            fetch = f"FETCH FORWARD {max_rows + 1} FROM {CURSOR}"  # one past the cap: "too many"
            rows = cast(Generator[Any, None, None], reader.stream(fetch))
            try:
                return columns, _collect(rows, max_rows=max_rows, max_bytes=max_bytes, field=field)
            finally:
                rows.close()


def _only_reads(action: int, *_: Any) -> int:
    return sqlite3.SQLITE_OK if action in _SQLITE_READS else sqlite3.SQLITE_DENY


def _read_sqlite(
    driver: sqlite3.Connection, statement: str, max_rows: int, max_bytes: int, field: str
) -> tuple[list[str], list[tuple[Any, ...]]]:
    deadline = time.monotonic() + STATEMENT_TIMEOUT_MS / 1000
    driver.set_authorizer(_only_reads)
    # SQLite has no statement timeout: a nonzero answer from the progress handler interrupts
    driver.set_progress_handler(lambda: int(time.monotonic() > deadline), 10_000)
    try:
        cursor = driver.cursor()
        try:
            cursor.execute(statement)
            columns = [column[0] for column in cursor.description or []]
            # sqlite3 steps one row at a time as the cursor is iterated
            rows = iter(cursor)
            return columns, _collect(rows, max_rows=max_rows, max_bytes=max_bytes, field=field)
        finally:
            cursor.close()
    finally:
        driver.set_authorizer(None)
        driver.set_progress_handler(None, 0)


def read_rows(
    connection: Connection, statement: str, *, max_rows: int, max_bytes: int, field: str
) -> tuple[list[str], list[tuple[Any, ...]]]:
    """Column names and rows of one statement, in the connection's (read-only) transaction."""
    import psycopg  # imported here for start-up speed, as in driver_errors

    driver = connection.connection.driver_connection
    dialect = connection.dialect.name
    if dialect == "postgresql" and isinstance(driver, psycopg.Connection):
        return _read_postgresql(driver, statement, max_rows, max_bytes, field)
    if dialect == "sqlite" and isinstance(driver, sqlite3.Connection):
        return _read_sqlite(driver, statement, max_rows, max_bytes, field)
    # configuration admits only these two drivers; anything else is refused, not guessed at
    raise BadInput(field, f"sql sources cannot be read through the {dialect} driver here.")
