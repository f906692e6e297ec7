"""A sql source can only read: one statement, refused by the driver when there are more, no write
through a function or a command, caps on rows and bytes while fetching, and only listed teams.

PostgreSQL: a fresh database with a `victim` table the injected statements try to write to.
SQLite: a file database with the same tables.
"""

from __future__ import annotations

import json
import sqlite3
from collections.abc import Iterator
from pathlib import Path

import pytest
from sqlalchemy import create_engine, text

from service.config import SqlConnection, load_settings
from service.datasets.sources import DatasetSource, load_table
from service.datasets.sql_source import SqlAccess
from service.errors import BadInput

# the probe from issue 8: closes the wrapper a string-built query used to put around it
ESCAPE = (
    "SELECT a, y FROM t) AS q; COMMIT; INSERT INTO victim VALUES (4242); "
    "SELECT * FROM (SELECT a, y FROM t"
)
SCRIBBLE = """
CREATE FUNCTION scribble() RETURNS integer LANGUAGE sql AS
$$ INSERT INTO victim VALUES (77) RETURNING v $$
"""
MB = 1024 * 1024


def _load(access: SqlAccess, connection: str, **sql: str) -> list[tuple[object, ...]]:
    source = DatasetSource.model_validate({"sql": {"connection": connection, **sql}})
    frame = load_table(source, base_dir=Path("."), sql=access).frame
    return [tuple(row) for row in frame.itertuples(index=False)]


def _refused(access: SqlAccess, connection: str, **sql: str) -> BadInput:
    with pytest.raises(BadInput) as caught:
        _load(access, connection, **sql)
    return caught.value


@pytest.fixture
def pg(postgresql_url: str) -> Iterator[tuple[SqlAccess, str]]:
    engine = create_engine(postgresql_url)
    with engine.begin() as connection:
        connection.execute(text("CREATE TABLE t (a integer, y integer)"))
        connection.execute(text("INSERT INTO t VALUES (1, 0), (2, 1), (3, 0)"))
        connection.execute(text("CREATE TABLE victim (v integer)"))
        connection.execute(text(SCRIBBLE))
    engine.dispose()
    connections = {"src": SqlConnection(postgresql_url, frozenset({"teamA"}))}
    yield SqlAccess(connections, max_rows=100, max_bytes=MB, team="teamA"), postgresql_url


def _victims(url: str) -> list[int]:
    engine = create_engine(url)
    with engine.connect() as connection:
        found = [int(v) for v in connection.execute(text("SELECT v FROM victim")).scalars()]
    engine.dispose()
    return found


def _tables(url: str) -> set[str]:
    engine = create_engine(url)
    with engine.connect() as connection:
        query = text("SELECT tablename FROM pg_tables WHERE schemaname = 'public'")
        found = set(connection.execute(query).scalars())
    engine.dispose()
    return found


def test_the_escape_from_the_issue_is_refused_and_writes_nothing(
    pg: tuple[SqlAccess, str],
) -> None:
    access, url = pg
    problem = _refused(access, "src", query=ESCAPE)
    assert problem.field == "dataset.sql.query"
    assert "refused" in problem.message
    assert _victims(url) == []
    # the query itself is what PostgreSQL sees, not a wrapper: a plain query still reads
    assert _load(access, "src", query="SELECT a, y FROM t ORDER BY a") == [(1, 0), (2, 1), (3, 0)]


@pytest.mark.parametrize(
    "query",
    [
        "SELECT 1; DROP TABLE victim",
        "SELECT 1 AS x; INSERT INTO victim VALUES (4242)",
        "CREATE TABLE made_here (x integer)",
        "INSERT INTO victim VALUES (4242) RETURNING v",
        "WITH w AS (INSERT INTO victim VALUES (4242) RETURNING v) SELECT v FROM w",
        "SELECT scribble() AS v",  # a function that writes: the read-only transaction refuses it
        "SELECT a FROM t FOR UPDATE",
    ],
)
def test_writes_and_second_statements_are_refused(pg: tuple[SqlAccess, str], query: str) -> None:
    access, url = pg
    problem = _refused(access, "src", query=query)
    assert problem.field == "dataset.sql.query"
    assert "the database refused it" in problem.message
    assert _victims(url) == []
    assert _tables(url) == {"t", "victim"}


def test_the_driver_refuses_the_second_statement(pg: tuple[SqlAccess, str]) -> None:
    access, _ = pg
    # PostgreSQL's own words for a Parse message with two commands (extended query protocol)
    problem = _refused(access, "src", query="SELECT 1 AS x; SELECT 2 AS x")
    assert "cannot insert multiple commands into a prepared statement" in problem.message


def test_percent_signs_and_braces_are_plain_text(pg: tuple[SqlAccess, str]) -> None:
    access, _ = pg
    # no placeholders are parsed: the statement goes to the server as written
    assert _load(access, "src", query="SELECT '100%' AS p, '{a}' AS b;  ") == [("100%", "{a}")]


def test_the_byte_cap_holds_while_fetching(pg: tuple[SqlAccess, str]) -> None:
    access, _ = pg
    wide = "SELECT repeat('x', 100000) AS big, n AS y FROM generate_series(1, {n}) AS n"
    assert len(_load(access, "src", query=wide.format(n=5))) == 5  # 0.5 MB: under the 1 MB cap
    problem = _refused(access, "src", query=wide.format(n=30))  # 3 MB
    assert problem.field == "dataset.sql.query"
    assert "more than 1 MB of values (FOLDWISE_SQL_MAX_MB)" in problem.message
    # rows are capped as they come too
    problem = _refused(access, "src", query="SELECT n FROM generate_series(1, 1000000) AS n")
    assert "more than 100 rows (FOLDWISE_SQL_MAX_ROWS)" in problem.message


def test_a_team_not_listed_gets_the_answer_for_an_unknown_connection(
    pg: tuple[SqlAccess, str],
) -> None:
    access, url = pg
    other = SqlAccess(access.connections, access.max_rows, access.max_bytes, team="teamB")
    not_listed = _refused(other, "src", table="t")
    unknown = _refused(other, "nowhere", table="t")
    assert not_listed.field == unknown.field == "dataset.sql.connection"
    assert not_listed.message == unknown.message.replace("'nowhere'", "'src'")
    assert "none are configured for your team" in not_listed.message
    # a plain URL (no teams) is for no team; "*" is for every team
    plain = SqlAccess({"src": SqlConnection(url, frozenset())}, team="teamA")
    assert "not a configured SQL connection" in _refused(plain, "src", table="t").message
    everyone = SqlAccess({"src": SqlConnection(url, None)}, team="teamB")
    assert len(_load(everyone, "src", table="t")) == 3


@pytest.fixture
def lite(tmp_path: Path) -> tuple[SqlAccess, Path]:
    path = tmp_path / "source.sqlite"
    with sqlite3.connect(path) as db:
        db.executescript(
            "CREATE TABLE t (a integer, y integer); INSERT INTO t VALUES (1, 0), (2, 1), (3, 0);"
            "CREATE TABLE victim (v integer);"
        )
    connections = {"lite": SqlConnection(f"sqlite:///{path}", frozenset({"teamA"}))}
    return SqlAccess(connections, max_rows=100, max_bytes=MB, team="teamA"), path


@pytest.mark.parametrize(
    "query",
    [
        ESCAPE,
        "SELECT 1; DELETE FROM t",
        "INSERT INTO victim VALUES (4242)",
        "DELETE FROM t",
        "CREATE TABLE made_here (x integer)",
        "PRAGMA query_only = OFF",
        "ATTACH DATABASE ':memory:' AS other",
        "WITH w AS (SELECT 1) INSERT INTO victim SELECT * FROM w",
    ],
)
def test_sqlite_refuses_writes_and_second_statements(
    lite: tuple[SqlAccess, Path], query: str
) -> None:
    access, path = lite
    problem = _refused(access, "lite", query=query)
    assert problem.field == "dataset.sql.query"
    assert "the database refused it" in problem.message
    with sqlite3.connect(path) as db:
        assert db.execute("SELECT count(*) FROM victim").fetchone() == (0,)
        assert db.execute("SELECT count(*) FROM t").fetchone() == (3,)
        names = {row[0] for row in db.execute("SELECT name FROM sqlite_master")}
    assert names == {"t", "victim"}


def test_a_missing_sqlite_file_is_refused_not_created(lite: tuple[SqlAccess, Path]) -> None:
    _, path = lite
    missing = path.with_name("missing.sqlite")
    connections = {"gone": SqlConnection(f"sqlite:///{missing}", None)}
    problem = _refused(SqlAccess(connections, team="teamA"), "gone", table="t")
    assert "unable to open database file" in problem.message
    assert not missing.exists()  # opened read-only (mode=ro): SQLite creates nothing


def test_sqlite_reads_under_the_caps(lite: tuple[SqlAccess, Path]) -> None:
    access, _ = lite
    assert _load(access, "lite", query="SELECT a, y FROM t ORDER BY a;") == [(1, 0), (2, 1), (3, 0)]
    wide = (
        "WITH RECURSIVE n(i) AS (SELECT 1 UNION ALL SELECT i + 1 FROM n WHERE i < 30) "
        "SELECT zeroblob(100000) AS big, i AS y FROM n"
    )
    problem = _refused(access, "lite", query=wide)
    assert "more than 1 MB of values (FOLDWISE_SQL_MAX_MB)" in problem.message
    # the authorizer is gone after the read: the connection's pool can be used as before
    assert _load(access, "lite", table="t")[0] == (1, 0)


def test_connections_are_read_with_their_teams() -> None:
    raw = json.dumps(
        {
            "a": {"url": "postgresql://u@h/db", "teams": ["t1", "t2"]},
            "b": {"url": "sqlite:///x.sqlite", "teams": "*"},
            "c": "postgresql+psycopg://u@h/db",
        }
    )
    settings = load_settings({"FOLDWISE_SQL_CONNECTIONS": raw, "FOLDWISE_SQL_MAX_MB": "0.5"})
    a, b, c = (settings.sql_connections[n] for n in "abc")
    assert a.url == "postgresql+psycopg://u@h/db"  # the driver whose one-statement rule we use
    assert a.usable_by("t1") and not a.usable_by("t3")
    assert b.usable_by("anyone")
    assert not c.usable_by("t1") and c.usable_by(None)  # None: the local command line
    assert settings.sql_max_bytes == MB // 2
    assert load_settings({}).sql_max_bytes == 200 * MB


@pytest.mark.parametrize(
    ("value", "words"),
    [
        ({"a": "mysql://u@h/db"}, "only from postgresql+psycopg:// or sqlite://"),
        ({"a": "postgresql+psycopg2://u@h/db"}, "only from postgresql+psycopg:// or sqlite://"),
        ({"a": {"url": "sqlite:///x", "teams": "t1"}}, '"teams" must be a list'),
        ({"a": {"url": "sqlite:///x", "teams": [""]}}, '"teams" must be a list'),
        ({"a": {"url": "sqlite:///x", "team": ["t1"]}}, "must be a URL or"),
        ({"a": 3}, "must be a URL or"),
    ],
)
def test_bad_connections_are_refused_at_start(value: object, words: str) -> None:
    with pytest.raises(BadInput) as caught:
        load_settings({"FOLDWISE_SQL_CONNECTIONS": json.dumps(value)})
    assert caught.value.field == "FOLDWISE_SQL_CONNECTIONS"
    assert words in caught.value.message
