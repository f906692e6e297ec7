"""`{"sql": ...}` sources: a table or a query on a connection the operator configured by name.

A request never carries a URL: it names a connection from FOLDWISE_SQL_CONNECTIONS that the
caller's team is listed on. Table names are checked as (schema.)identifier and quoted by the
dialect; a query runs as one statement (the driver refuses a second) inside a read-only
transaction (PostgreSQL refuses any write in it), with a statement timeout, and its rows are
counted against the row and byte caps while they are fetched.
"""

from __future__ import annotations

import re
import sqlite3
import threading
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from urllib.parse import quote

import pandas as pd
from pydantic import BaseModel, ConfigDict, Field, model_validator
from sqlalchemy import Connection, Engine, create_engine, make_url, text
from sqlalchemy.pool import QueuePool

from service.config import Settings, SqlConnection
from service.datasets.sql_fetch import STATEMENT_TIMEOUT_MS, driver_errors, read_rows
from service.errors import BadInput

_IDENTIFIER = re.compile(r"^[A-Za-z_][A-Za-z0-9_]{0,62}$")


class SqlSource(BaseModel):
    """A table (`table`) or a query (`query`) on the configured connection `connection`."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    connection: str = Field(min_length=1, max_length=100)
    table: str | None = Field(default=None, min_length=1, max_length=200)
    query: str | None = Field(default=None, min_length=1, max_length=100_000)

    @model_validator(mode="after")
    def _table_or_query(self) -> SqlSource:
        if (self.table is None) == (self.query is None):
            raise ValueError("a sql source needs exactly one of 'table' or 'query'")
        return self


@dataclass(frozen=True)
class SqlAccess:
    """What the operator allows one caller: its usable connections and the caps of one source."""

    connections: Mapping[str, SqlConnection] = field(default_factory=dict)
    max_rows: int = 1_000_000
    max_bytes: int = 200 * 1024 * 1024
    # the caller's team; None is the local command line, which holds the configuration itself
    team: str | None = None

    @classmethod
    def for_team(cls, settings: Settings, team: str | None) -> SqlAccess:
        """The operator's connections and caps, as `team` may use them."""
        return cls(settings.sql_connections, settings.sql_max_rows, settings.sql_max_bytes, team)

    def usable(self) -> dict[str, str]:
        """Connection name -> URL, for the connections this caller's team may use."""
        return {n: c.url for n, c in self.connections.items() if c.usable_by(self.team)}


_engines: dict[str, Engine] = {}
_engines_lock = threading.Lock()


def _engine(url: str) -> Engine:
    # One small pool per configured URL and process.
    with _engines_lock:
        if url not in _engines:
            database = make_url(url).database
            if url.startswith("sqlite") and database and database != ":memory:":
                # opened read-only by SQLite itself: a missing file is an error, never created
                uri = f"file:{quote(str(Path(database).resolve()))}?mode=ro"
                _engines[url] = create_engine(
                    "sqlite://",
                    creator=lambda: sqlite3.connect(uri, uri=True, check_same_thread=False),
                    poolclass=QueuePool,
                    pool_size=2,
                    max_overflow=2,
                )
            else:
                # no pre-ping: its probe would open the transaction SET TRANSACTION must start
                _engines[url] = create_engine(url, pool_size=2, max_overflow=2)
        return _engines[url]


def table_name_sql(name: str, connection: Connection, *, field: str) -> str:
    """`schema.table` checked part by part and quoted by the dialect's own preparer."""
    parts = name.split(".")
    if len(parts) > 2 or not all(_IDENTIFIER.match(p) for p in parts):
        raise BadInput(
            field,
            f"{name!r} is not a table name; give table or schema.table, each a letter or "
            "underscore followed by letters, digits or underscores.",
        )
    quote = connection.dialect.identifier_preparer.quote_identifier
    return ".".join(quote(p) for p in parts)


def _read_only(connection: Connection) -> None:
    dialect = connection.dialect.name
    if dialect == "postgresql":
        # must come first in the transaction; LOCAL ends with it, so pooled connections stay clean
        connection.execute(text("SET TRANSACTION READ ONLY"))
        connection.execute(text(f"SET LOCAL statement_timeout = {STATEMENT_TIMEOUT_MS}"))
    elif dialect == "sqlite":
        connection.exec_driver_sql("PRAGMA query_only = ON")


def read_sql_source(
    source: SqlSource, access: SqlAccess, *, field: str
) -> tuple[pd.DataFrame, dict[str, str]]:
    """The rows of a sql source as a frame (not yet canonical) and its origin."""
    usable = access.usable()
    url = usable.get(source.connection)
    if url is None:
        # a connection the team may not use gets the same answer as one that does not exist
        known = ", ".join(sorted(usable)) or "none are configured for your team"
        raise BadInput(
            f"{field}.connection",
            f"{source.connection!r} is not a configured SQL connection ({known}); the operator "
            "names connections and their teams in FOLDWISE_SQL_CONNECTIONS.",
        )
    engine = _engine(url)
    inner_field = f"{field}.table" if source.table is not None else f"{field}.query"
    try:
        # closing the connection rolls back: a read-only transaction has nothing to keep
        with engine.connect() as connection:
            _read_only(connection)
            if source.table is not None:
                quoted = table_name_sql(source.table, connection, field=inner_field)
                statement = f"SELECT * FROM {quoted}"
            else:
                assert source.query is not None
                statement = source.query.strip().rstrip(";").rstrip()
            # The statement is sent as the caller wrote it (never wrapped in a string a closing
            # parenthesis could escape); the driver refuses a second statement, see read_rows.
            columns, rows = read_rows(
                connection,
                statement,
                max_rows=access.max_rows,
                max_bytes=access.max_bytes,
                field=inner_field,
            )
    except BadInput:
        raise
    except driver_errors() as exc:
        reason = str(getattr(exc, "orig", None) or exc).strip().splitlines()[0]
        raise BadInput(
            inner_field, f"the database refused it ({reason}); check the name or the query."
        ) from None
    # coerce_float: NUMERIC arrives as Decimal, which must read as the number it is
    frame = pd.DataFrame.from_records(rows, columns=columns, coerce_float=True)
    origin = {"sql_connection": source.connection}
    origin.update({"sql_table": source.table} if source.table else {"sql_query": statement})
    return frame, origin
