"""The sql-source probes of issue 8 against a live `foldwise serve`: the escape that wrote to the
operator's database, a team not listed on a connection, the byte cap, and the start-up warning
about a role that can write. PostgreSQL (a second database with a `victim` table) and SQLite."""

from __future__ import annotations

import json
import sqlite3
import time
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import httpx
import psycopg
import pytest
from api.server import Server, running_server
from api.stores import PG_ADMIN, PG_URL

from .tables import TEMPLATE

ESCAPE = (
    "SELECT a, y FROM t) AS q; COMMIT; INSERT INTO victim VALUES (4242); "
    "SELECT * FROM (SELECT a, y FROM t"
)


@dataclass
class Live:
    server: Server
    url: str
    lite: Path
    log: Path


def _setup_source(name: str, reader: str) -> None:
    with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
        admin.execute(f'CREATE ROLE "{reader}" LOGIN')
    with psycopg.connect(f"{PG_ADMIN.replace('dbname=postgres', '')} dbname={name}") as db:
        db.execute("CREATE TABLE t (a double precision, y integer)")
        db.execute("INSERT INTO t SELECT n * 0.5 + (n % 2), n % 2 FROM generate_series(1, 60) AS n")
        db.execute("CREATE TABLE victim (v integer)")
        db.execute(
            "CREATE FUNCTION scribble() RETURNS integer LANGUAGE sql AS "
            "$$ INSERT INTO victim VALUES (77) RETURNING v $$"
        )
        # the reader's role may only read t: the start-up check must not warn about it
        db.execute(f'GRANT SELECT ON t TO "{reader}"')


def _drop_source(name: str, reader: str) -> None:
    with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
        admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        admin.execute(f'DROP ROLE IF EXISTS "{reader}"')


@pytest.fixture(scope="module")
def live(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Live]:
    home = tmp_path_factory.mktemp("home")
    name, reader = f"foldwise_src_{uuid.uuid4().hex[:10]}", f"foldwise_ro_{uuid.uuid4().hex[:8]}"
    _setup_source(name, reader)
    lite = home / "source.sqlite"
    with sqlite3.connect(lite) as db:
        db.executescript(
            "CREATE TABLE t (a real, y integer); CREATE TABLE victim (v integer);"
            "INSERT INTO t VALUES (0.5, 0), (1.5, 1), (2.0, 0);"
        )
    url = f"{PG_URL}/{name}"
    reader_url = url.replace("postgres@", f"{reader}@")
    connections = {
        "src": {"url": url, "teams": ["teamA"]},  # postgres: a superuser, so a warning
        "reader": {"url": reader_url, "teams": "*"},
        "lite": {"url": f"sqlite:///{lite}", "teams": ["teamA"]},
        "plain": url,  # the plain form names no team
    }
    log = home / "server.log"
    try:
        with running_server(
            home,
            log,
            FOLDWISE_SQL_CONNECTIONS=json.dumps(connections),
            FOLDWISE_SQL_MAX_MB="1",
        ) as server:
            yield Live(server, url, lite, log)
    finally:
        _drop_source(name, reader)


def _victims(live: Live) -> tuple[list[int], list[int]]:
    with psycopg.connect(live.url.replace("postgresql+psycopg", "postgresql")) as db:
        pg = [row[0] for row in db.execute("SELECT v FROM victim")]
    with sqlite3.connect(live.lite) as db:
        lite = [row[0] for row in db.execute("SELECT v FROM victim")]
    return pg, lite


def _problem(answer: httpx.Response, field: str) -> str:
    assert answer.status_code == 422, answer.text
    assert answer.headers["content-type"] == "application/problem+json"
    problem: dict[str, Any] = answer.json()
    assert problem["field"] == field, problem
    assert "Traceback" not in problem["detail"]
    return str(problem["detail"])


def _job(connection: str, **sql: str) -> dict[str, Any]:
    return {
        **TEMPLATE,
        "target": "y",
        "dataset": {"sql": {"connection": connection, **sql}},
    }


@pytest.mark.parametrize("connection", ["src", "lite"])
def test_the_escape_is_a_422_on_every_route_and_writes_nothing(live: Live, connection: str) -> None:
    before = live.server.snapshot()
    source = {"sql": {"connection": connection, "query": ESCAPE}}
    with live.server.client(live.server.token("teamA")) as client:
        job = client.post("/v1/jobs", json=_job(connection, query=ESCAPE))
        dataset = client.post("/v1/datasets", json=source)
        schedule = client.post(
            "/v1/schedules",
            json={"source": source, "template": {**TEMPLATE, "target": "y"}, "cron": "0 3 * * *"},
        )
    assert "the database refused it" in _problem(job, "dataset.sql.query")
    assert "the database refused it" in _problem(dataset, "dataset.sql.query")
    assert "the database refused it" in _problem(schedule, "source.sql.query")
    assert _victims(live) == ([], [])
    assert live.server.snapshot() == before


@pytest.mark.parametrize(
    "query",
    [
        "SELECT 1 AS a; DROP TABLE victim",
        "CREATE TABLE made_here (a integer)",
        "SELECT scribble() AS a, 1 AS y",  # a function that writes
    ],
)
def test_other_writes_are_422s_and_write_nothing(live: Live, query: str) -> None:
    with live.server.client(live.server.token("teamA")) as client:
        answer = client.post("/v1/jobs", json=_job("src", query=query))
    assert "the database refused it" in _problem(answer, "dataset.sql.query")
    assert _victims(live) == ([], [])
    with psycopg.connect(live.url.replace("postgresql+psycopg", "postgresql")) as db:
        tables = {row[0] for row in db.execute("SELECT tablename FROM pg_tables")}
    assert {"t", "victim"} <= tables and "made_here" not in tables


def test_a_team_not_listed_is_told_what_an_unknown_connection_is_told(live: Live) -> None:
    before = live.server.snapshot()
    with live.server.client(live.server.token("teamB")) as client:
        not_listed = client.post("/v1/datasets", json={"sql": {"connection": "src", "table": "t"}})
        unknown = client.post("/v1/datasets", json={"sql": {"connection": "nope", "table": "t"}})
        plain = client.post("/v1/datasets", json={"sql": {"connection": "plain", "table": "t"}})
        job = client.post("/v1/jobs", json=_job("src", table="t"))
    said = _problem(not_listed, "dataset.sql.connection")
    assert said == _problem(unknown, "dataset.sql.connection").replace("'nope'", "'src'")
    assert "'src' is not a configured SQL connection (reader)" in said  # only what B may use
    assert "not a configured SQL connection" in _problem(plain, "dataset.sql.connection")
    assert "not a configured SQL connection" in _problem(job, "dataset.sql.connection")
    assert live.server.snapshot() == before
    with live.server.client(live.server.token("teamA")) as client:
        mine = client.post("/v1/datasets", json={"sql": {"connection": "src", "table": "t"}})
    assert mine.status_code == 201, mine.text


def test_the_byte_cap_answers_with_the_cap(live: Live) -> None:
    wide = "SELECT repeat('x', 100000) AS a, n % 2 AS y FROM generate_series(1, 30) AS n"
    with live.server.client(live.server.token("teamA")) as client:
        answer = client.post("/v1/jobs", json=_job("src", query=wide))
    assert "more than 1 MB of values (FOLDWISE_SQL_MAX_MB)" in _problem(answer, "dataset.sql.query")


def test_a_role_that_can_write_is_warned_about_at_start(live: Live) -> None:
    deadline = time.monotonic() + 30
    while True:
        ready = httpx.get(f"{live.server.base_url}/readyz").json()
        if ready["checks"]["sql_connections"] != "checking":
            break
        assert time.monotonic() < deadline
        time.sleep(0.2)
    # src and plain connect as postgres, a superuser; the reader only reads
    assert ready["checks"]["sql_connections"].startswith("warning: 2 connection(s) can write")
    text = live.log.read_text()
    assert "sql connection 'src': its database role can write (it is a superuser" in text
    assert "sql connection 'reader'" not in text  # SELECT on one table only: nothing to say
    assert "sql connection 'plain' lists no teams" in text
    # the reader's role reads, under every team ("*")
    with live.server.client(live.server.token("teamC")) as client:
        read = client.post("/v1/datasets", json={"sql": {"connection": "reader", "table": "t"}})
    assert read.status_code == 201, read.text
