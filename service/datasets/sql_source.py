"""`{"sql": ...}` sources: a table or a query on a connection the operator configured by name.

A request never carries a URL: it names a connection from FOLDWISE_SQL_CONNECTIONS. Table names
are checked as (schema.)identifier and quoted by the dialect; queries run inside a read-only
transaction (PostgreSQL refuses any write in it) with a row cap and a statement timeout.
"""

from __future__ import annotations

import re
import threading
from collections.abc import Mapping
from dataclasses import dataclass, field

import pandas as pd
from pydantic import BaseModel, ConfigDict, Field, model_validator
from sqlalchemy import Connection, Engine, create_engine, text
from sqlalchemy.exc import SQLAlchemyError

from service.errors import BadInput

_IDENTIFIER = re.compile(r"^[A-Za-z_][A-Za-z0-9_]{0,62}$")
STATEMENT_TIMEOUT_MS = 120_000


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
    """What the operator allows: named connections and the most rows one source may return."""

    connections: Mapping[str, str] = field(default_factory=dict)
    max_rows: int = 1_000_000


_engines: dict[str, Engine] = {}
_engines_lock = threading.Lock()


def _engine(url: str) -> Engine:
    # One small pool per configured URL and process; pre-ping because sources are read rarely.
    with _engines_lock:
        if url not in _engines:
            # no pre-ping: its probe would open the transaction that SET TRANSACTION must start
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
    url = access.connections.get(source.connection)
    if url is None:
        known = ", ".join(sorted(access.connections)) or "none are configured"
        raise BadInput(
            f"{field}.connection",
            f"{source.connection!r} is not a configured SQL connection ({known}); the operator "
            "names connections in FOLDWISE_SQL_CONNECTIONS.",
        )
    engine = _engine(url)
    inner_field = f"{field}.table" if source.table is not None else f"{field}.query"
    try:
        # closing the connection rolls back: a read-only transaction has nothing to keep
        with engine.connect() as connection:
            _read_only(connection)
            if source.table is not None:
                inner = (
                    f"SELECT * FROM {table_name_sql(source.table, connection, field=inner_field)}"
                )
            else:
                assert source.query is not None
                inner = source.query.strip().rstrip(";")
            # Wrapping keeps it one statement (a second one is a syntax error) and caps the rows:
            # one more than the cap tells "too many" from "exactly the cap".
            capped = f"SELECT * FROM ({inner}) AS foldwise_source LIMIT {access.max_rows + 1}"
            result = connection.execute(text(capped))
            columns = list(result.keys())
            # coerce_float: NUMERIC arrives as Decimal, which must read as the number it is
            frame = pd.DataFrame.from_records(result.fetchall(), columns=columns, coerce_float=True)
    except BadInput:
        raise
    except SQLAlchemyError as exc:
        reason = str(getattr(exc, "orig", None) or exc).strip().splitlines()[0]
        raise BadInput(
            inner_field, f"the database refused it ({reason}); check the name or the query."
        ) from None
    if len(frame) > access.max_rows:
        raise BadInput(
            inner_field,
            f"returns more than {access.max_rows} rows (FOLDWISE_SQL_MAX_ROWS); "
            "select fewer rows in the query.",
        )
    origin = {"sql_connection": source.connection}
    origin.update({"sql_table": source.table} if source.table else {"sql_query": inner})
    return frame, origin
