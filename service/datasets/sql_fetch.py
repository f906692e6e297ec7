"""Running a sql source's one statement at the driver and fetching its rows under the caps.

Why the driver and not SQLAlchemy's `text()`: the guarantee that a second statement is refused
lives in the driver. psycopg 3 declares a named (server-side) cursor with `force_extended=True`,
i.e. through PostgreSQL's extended query protocol, whose Parse message "cannot include more than
one SQL statement" (PostgreSQL manual, Message Flow, Extended Query); and `DECLARE ... CURSOR FOR`
accepts only a SELECT or VALUES. Python's sqlite3 refuses a second statement in one `execute`
("You can only execute one statement at a time"), and an authorizer lets a statement read only.

Rows come in batches sized so that a batch of rows as large as the largest seen so far still
fits in what is left of the byte cap: the caps hold while fetching, not after.
"""

from __future__ import annotations

import sqlite3
import time
from typing import Any

import psycopg
from sqlalchemy import Connection
from sqlalchemy.exc import SQLAlchemyError

from service.errors import BadInput

STATEMENT_TIMEOUT_MS = 120_000
# the most rows one FETCH asks for; fewer when rows are large (see _batch)
FETCH_ROWS = 5_000
# what one number, date or boolean is counted as; text and bytes count their length
SCALAR_BYTES = 8
DRIVER_ERRORS = (SQLAlchemyError, psycopg.Error, sqlite3.Error)

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


def _fetch(cursor: Any, *, max_rows: int, max_bytes: int, field: str) -> list[tuple[Any, ...]]:
    rows: list[tuple[Any, ...]] = []
    used, largest = 0, 1
    deadline = time.monotonic() + STATEMENT_TIMEOUT_MS / 1000
    while True:
        # one more row than the cap tells "too many" from "exactly the cap"
        batch = max(1, min(FETCH_ROWS, (max_bytes - used) // largest, max_rows + 1 - len(rows)))
        chunk = cursor.fetchmany(batch)
        if not chunk:
            return rows
        for row in chunk:
            size = row_bytes(row)
            used, largest = used + size, max(largest, size)
        if used > max_bytes:
            raise BadInput(field, _too_many_bytes(max_bytes))
        rows.extend(tuple(row) for row in chunk)
        if len(rows) > max_rows:
            raise BadInput(field, _too_many_rows(max_rows))
        # each FETCH has its own statement timeout: the whole read is held to one as well
        if time.monotonic() > deadline:
            raise BadInput(
                field,
                f"took longer than {STATEMENT_TIMEOUT_MS // 1000} s to read; select fewer rows.",
            )


def _read_postgresql(
    driver: psycopg.Connection[Any], statement: str, max_rows: int, max_bytes: int, field: str
) -> tuple[list[str], list[tuple[Any, ...]]]:
    # a named cursor: DECLARE via the extended protocol (one statement only), FETCH in batches
    with driver.cursor(name="foldwise_source") as cursor:
        cursor.execute(statement)
        columns = [column.name for column in cursor.description or []]
        return columns, _fetch(cursor, max_rows=max_rows, max_bytes=max_bytes, field=field)


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
            return columns, _fetch(cursor, max_rows=max_rows, max_bytes=max_bytes, field=field)
        finally:
            cursor.close()
    finally:
        driver.set_authorizer(None)
        driver.set_progress_handler(None, 0)


def read_rows(
    connection: Connection, statement: str, access: Any, *, field: str
) -> tuple[list[str], list[tuple[Any, ...]]]:
    """Column names and rows of one statement, in the connection's (read-only) transaction."""
    driver = connection.connection.driver_connection
    dialect = connection.dialect.name
    if dialect == "postgresql" and isinstance(driver, psycopg.Connection):
        return _read_postgresql(driver, statement, access.max_rows, access.max_bytes, field)
    if dialect == "sqlite" and isinstance(driver, sqlite3.Connection):
        return _read_sqlite(driver, statement, access.max_rows, access.max_bytes, field)
    # configuration admits only these two drivers; anything else is refused, not guessed at
    raise BadInput(field, f"sql sources cannot be read through the {dialect} driver here.")
