"""A schedule on a sql query source (the local PostgreSQL) against a live `foldwise serve`:
unchanged rows record unchanged, added rows run a job compared by Welch's test (other folds)."""

from __future__ import annotations

import json
import time
from pathlib import Path
from typing import Any

import httpx
import numpy as np
from api.server import running_server
from sqlalchemy import create_engine, text

from .tables import TEMPLATE


def _insert(url: str, first: int, rows: int) -> None:
    rng = np.random.default_rng(first)
    labels = np.arange(first, first + rows) % 2
    values = [
        {
            "id": first + i,
            "pressure": float(labels[i] * 1.5 + rng.normal()),
            "failed": int(labels[i]),
        }
        for i in range(rows)
    ]
    engine = create_engine(url)
    with engine.begin() as connection:
        connection.execute(
            text("CREATE TABLE IF NOT EXISTS readings (id int, pressure float8, failed int)")
        )
        connection.execute(text("INSERT INTO readings VALUES (:id, :pressure, :failed)"), values)
    engine.dispose()


def _wait(client: httpx.Client, sid: str, rid: int) -> dict[str, Any]:
    deadline = time.monotonic() + 180
    while True:
        found = next(
            r for r in client.get(f"/v1/schedules/{sid}/refreshes").json()["data"] if r["id"] == rid
        )
        if found["status"] not in ("pending", "running"):
            return found
        assert time.monotonic() < deadline
        time.sleep(0.3)


def test_sql_source_schedule(postgresql_url: str, tmp_path: Path) -> None:
    _insert(postgresql_url, 0, 90)
    connections = json.dumps({"plant": {"url": postgresql_url, "teams": ["plant"]}})
    with (
        running_server(
            tmp_path, tmp_path / "server.log", FOLDWISE_SQL_CONNECTIONS=connections
        ) as live,
        live.client(live.token("plant")) as client,
    ):
        source = {
            "sql": {
                "connection": "plant",
                "query": "SELECT pressure, failed FROM readings ORDER BY id",
            }
        }
        created = client.post(
            "/v1/schedules", json={"source": source, "template": TEMPLATE, "cron": "0 3 * * *"}
        )
        assert created.status_code == 201, created.text
        sid = created.json()["id"]
        first = _wait(client, sid, client.post(f"/v1/schedules/{sid}/refresh").json()["id"])
        assert first["status"] == "reselected" and first["job_id"]
        jobs = live.count_jobs()
        second = client.post(f"/v1/schedules/{sid}/refresh").json()
        assert second["status"] == "unchanged" and live.count_jobs() == jobs

        _insert(postgresql_url, 90, 30)  # more rows: other folds, so an unpaired test
        third = _wait(client, sid, client.post(f"/v1/schedules/{sid}/refresh").json()["id"])
        assert third["dataset_hash"] != first["dataset_hash"]
        assert third["comparison"]["test"] == "welch_t"
        assert 0.0 <= third["comparison"]["p_value"] <= 1.0

        # a connection the operator did not configure is refused, naming the field
        bad = {"sql": {"connection": "elsewhere", "table": "readings"}}
        refused = client.post(
            "/v1/schedules", json={"source": bad, "template": TEMPLATE, "cron": "0 3 * * *"}
        )
        assert refused.status_code == 422
        assert refused.json()["field"] == "source.sql.connection"
        # and registering the same query as a dataset gives the hash the refresh saw
        registered = client.post("/v1/datasets", json=source)
        assert registered.status_code in (200, 201), registered.text
        assert registered.json()["content_hash"] == third["dataset_hash"]
