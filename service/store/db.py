"""Engines, sessions and migrations for the store, on SQLite (embedded) or PostgreSQL."""

from __future__ import annotations

import json
import sqlite3
import time
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sqlalchemy import Connection, Engine, Insert, Table, create_engine, event, text
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.engine import make_url
from sqlalchemy.exc import OperationalError, ProgrammingError
from sqlalchemy.orm import Session, sessionmaker

# imported for its tables: with it, Base.metadata holds every table a new store is made with
from service.store import followup_models as followup_models
from service.store.models import Base
from service.store.revision import HEAD_REVISION
from service.store.types import utcnow

if TYPE_CHECKING:
    from alembic.config import Config

__all__ = [
    "HEAD_REVISION",
    "dispose_after_fork",
    "insert_ignoring_duplicates",
    "inserted_keys",
    "make_engine",
    "make_read_session_factory",
    "make_session_factory",
    "upgrade_database",
    "utcnow",
]

MIGRATIONS = Path(__file__).resolve().parent / "migrations"
# PostgreSQL ends a transaction left idle this long; our transactions are well under a second.
IDLE_TX_MS = 60_000
# The execution option that makes a SQLite transaction begin deferred (see _tune_sqlite).
READ_ONLY_OPTION = "foldwise_read_only"
# Any constant will do; it only has to be the same in every process that migrates.
_MIGRATION_LOCK = 0x666F6C64  # "fold"


def _dump_json(value: Any) -> str:
    # PostgreSQL refuses NaN and Infinity inside JSON; refusing them here too makes SQLite fail the
    # same way instead of storing a document PostgreSQL could not load.
    return json.dumps(value, allow_nan=False, separators=(",", ":"))


def make_engine(
    url: str,
    *,
    busy_timeout_ms: int = 30_000,
    durable_commits: bool = True,
    pool_size: int = 2,
    max_overflow: int = 3,
    pool_timeout: float = 30.0,
) -> Engine:
    """An engine for `url`, tuned for SQLite's single writer or a small PostgreSQL pool.

    `durable_commits=False` (PostgreSQL only) lets a commit return before its WAL record is
    flushed. A server crash may then lose the last few transactions whole, never half of one:
    fit for workers, whose lost work shows as a unit still queued or under an expired lease that
    the reconciler hands out again; never for the API, which promises a stored job.
    The pool settings apply to PostgreSQL; the API sizes them to its thread limit (admission.py).
    """
    parsed = make_url(url)
    if parsed.get_backend_name() != "sqlite":
        engine = create_engine(
            url,
            json_serializer=_dump_json,
            pool_pre_ping=True,
            pool_size=pool_size,
            max_overflow=max_overflow,
            pool_timeout=pool_timeout,
            # A transaction left open by a stuck caller is ended by the server instead of holding
            # a connection "idle in transaction" (and its snapshot) for good.
            connect_args={"options": f"-c idle_in_transaction_session_timeout={IDLE_TX_MS}"},
        )
        if not durable_commits:

            @event.listens_for(engine, "connect")
            def _relaxed(dbapi_connection: Any, _record: Any) -> None:
                with dbapi_connection.cursor() as cursor:
                    cursor.execute("SET synchronous_commit TO off")
                dbapi_connection.commit()

        return engine
    if (
        parsed.database
        and parsed.database != ":memory:"
        and not parsed.database.startswith("file:")
    ):
        Path(parsed.database).expanduser().parent.mkdir(parents=True, exist_ok=True)
    engine = create_engine(url, json_serializer=_dump_json)
    _tune_sqlite(engine, busy_timeout_ms)
    return engine


def _tune_sqlite(engine: Engine, busy_timeout_ms: int) -> None:
    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_connection: Any, _record: Any) -> None:
        # Take BEGIN away from the sqlite3 module (it skips it before SELECT and DDL) so the
        # "begin" hook below decides how every transaction starts (SQLAlchemy's SQLite docs,
        # "Enabling Non-Legacy SQLite Transactional Modes").
        dbapi_connection.isolation_level = None
        cursor = dbapi_connection.cursor()
        # The busy timeout makes a second writer wait for the lock instead of failing at once.
        cursor.execute(f"PRAGMA busy_timeout={int(busy_timeout_ms)}")
        cursor.execute("PRAGMA foreign_keys=ON")
        # In WAL mode NORMAL never corrupts the file; it may lose the last commits on power loss,
        # which the store survives (units not marked done are run again). FULL would fsync on
        # every commit, and a job commits a few times per unit.
        cursor.execute("PRAGMA synchronous=NORMAL")
        _enter_wal(cursor, deadline=time.monotonic() + busy_timeout_ms / 1000)
        cursor.close()

    @event.listens_for(engine, "begin")
    def _on_begin(connection: Connection) -> None:
        # IMMEDIATE takes the write lock up front, where the busy timeout applies. A deferred
        # transaction that reads and then writes fails with SQLITE_BUSY at once when another
        # writer got in between, and waiting cannot help it. Sessions made for reading
        # (make_read_session_factory) begin deferred instead: in WAL mode they read a snapshot
        # and never wait for the writer, so readers cannot queue behind a job's commits.
        if connection.get_execution_options().get(READ_ONLY_OPTION):
            connection.exec_driver_sql("BEGIN")
        else:
            connection.exec_driver_sql("BEGIN IMMEDIATE")


def _enter_wal(cursor: Any, *, deadline: float) -> None:
    # WAL lets readers proceed while one writer commits. The mode is stored in the file, so this
    # is a no-op except on a new database, where switching needs a lock that SQLite does not wait
    # for (no busy handler on that path): processes opening a fresh file together retry here.
    while True:
        try:
            cursor.execute("PRAGMA journal_mode=WAL")
            return
        except sqlite3.OperationalError as error:
            if "locked" not in str(error) or time.monotonic() > deadline:
                raise
            time.sleep(0.01)


def make_session_factory(engine: Engine) -> sessionmaker[Session]:
    """Sessions bound to `engine` whose objects stay readable after commit."""
    return sessionmaker(bind=engine, expire_on_commit=False)


def make_read_session_factory(engine: Engine) -> sessionmaker[Session]:
    """Sessions for reading: on SQLite their transactions begin deferred and take no write lock.

    They share `engine`'s pool (an execution option, not a second engine). A write through one
    still works but may fail at once with "database is locked" when another writer got in
    first, so requests that write use make_session_factory.
    """
    return sessionmaker(
        bind=engine.execution_options(**{READ_ONLY_OPTION: True}),
        expire_on_commit=False,
        autoflush=False,
    )


def alembic_config(url: str) -> Config:
    """An Alembic configuration for the packaged migrations; no alembic.ini needed."""
    from alembic.config import Config

    config = Config()
    config.set_main_option("script_location", str(MIGRATIONS))
    # Dated file names, so the versions folder lists in the order the schema changed.
    config.set_main_option(
        "file_template", "%%(year)d_%%(month).2d_%%(day).2d_%%(hour).2d%%(minute).2d_%%(slug)s"
    )
    # configparser would read "%" in an encoded password as interpolation.
    config.set_main_option("sqlalchemy.url", url.replace("%", "%%"))
    return config


def upgrade_database(url: str) -> None:
    """Bring the schema at `url` to the newest revision; a no-op when it is already there."""
    engine = make_engine(url)
    try:
        if _at_head(engine):
            return
        with engine.begin() as connection:
            # On SQLite the BEGIN IMMEDIATE of this transaction serialises makers of a new store.
            if connection.dialect.name == "sqlite" and _made_from_models(connection):
                return
        # imported here for start-up speed: a store already at head never loads Alembic
        from alembic import command

        with engine.begin() as connection:
            if connection.dialect.name == "postgresql":
                # Two processes starting at once (API and a worker) would both see an empty
                # schema; the second waits here and then finds the revision already applied.
                connection.execute(
                    text("SELECT pg_advisory_xact_lock(:key)"), {"key": _MIGRATION_LOCK}
                )
            # On SQLite the BEGIN IMMEDIATE of this transaction serialises migrators the same way.
            config = alembic_config(url)
            config.attributes["connection"] = connection
            command.upgrade(config, "head")
    finally:
        engine.dispose()


def _made_from_models(connection: Connection) -> bool:
    """Make a new, empty SQLite store from the models and stamp it at head; False (nothing
    done) when the store has any table.

    The models and the migrations build the same schema (tests/store/test_migrations.py holds
    the two to each other, and runs every migration down and up on a store made this way), and
    on an empty store a migration's data steps have nothing to change, so a new store, as every
    first `foldwise select` in a new home makes, skips importing Alembic and replaying thirteen
    migrations (a few tenths of a second of a small job's wall).
    """
    tables = connection.execute(text("SELECT count(*) FROM sqlite_master WHERE type = 'table'"))
    if tables.scalar():
        return False
    Base.metadata.create_all(connection)
    # the table Alembic keeps its revision in, as Alembic itself creates it
    connection.execute(
        text(
            "CREATE TABLE alembic_version (version_num VARCHAR(32) NOT NULL, "
            "CONSTRAINT alembic_version_pkc PRIMARY KEY (version_num))"
        )
    )
    connection.execute(
        text("INSERT INTO alembic_version (version_num) VALUES (:head)"), {"head": HEAD_REVISION}
    )
    return True


def _at_head(engine: Engine) -> bool:
    try:
        with engine.connect() as connection:
            version = connection.execute(text("SELECT version_num FROM alembic_version"))
            return version.scalar() == HEAD_REVISION
    except (OperationalError, ProgrammingError):  # no version table yet: a new store
        return False


def insert_ignoring_duplicates(
    session: Session, table: Table | type[Base], rows: list[dict[str, Any]]
) -> int:
    """Insert `rows`, skipping any that collide with an existing key; return how many went in.

    Every row must carry the same keys (they go in as one executemany).
    """
    return len(inserted_keys(session, table, rows))


def inserted_keys(
    session: Session, table: Table | type[Base], rows: list[dict[str, Any]]
) -> list[Any]:
    """`insert_ignoring_duplicates`, returning the primary keys of the rows that went in."""
    if not rows:
        return []
    target = table if isinstance(table, Table) else table.__table__
    if not isinstance(target, Table):  # a mapped class over a join or a select
        raise TypeError(f"insert_ignoring_duplicates needs a table, not {target!r}")
    dialect = session.get_bind().dialect.name
    statement: Insert
    if dialect == "postgresql":
        statement = postgresql.insert(target).on_conflict_do_nothing()
    elif dialect == "sqlite":
        statement = sqlite.insert(target).on_conflict_do_nothing()
    else:
        raise NotImplementedError(f"insert_ignoring_duplicates: no recipe for {dialect}")
    # Count the rows RETURNING hands back rather than trusting cursor.rowcount, which DBAPIs
    # define loosely for executemany; skipped rows return nothing.
    returned = session.execute(statement.returning(*target.primary_key.columns), rows)
    return [row[0] if len(row) == 1 else tuple(row) for row in returned.all()]


def dispose_after_fork(engine: Engine) -> None:
    """Drop the pool a forked child inherited without closing the parent's connections."""
    # SQLAlchemy pooling docs, "Using Connection Pools with Multiprocessing or os.fork()".
    engine.dispose(close=False)
