"""A nested interval's procedure folds in every reader-facing row (issue 11), on both stores.

The interval's procedures are stored as outer folds numbered from scopes.INTERVAL_REPEAT_BASE up;
readers must see them as `interval_outer` / `interval_inner`, numbered by the interval's
repetition, so that the `outer` rows are the job's own outer folds and their mean is the estimate.
Checked through the API's fold-score listing, CSV and Parquet exports, the dataset-wide
`role` filter and provenance, on one small job on iris (ships with scikit-learn; Fisher 1936).
"""

from __future__ import annotations

import csv
import io
import json
import os
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import psycopg
import pyarrow.parquet as pq
import pytest
from fastapi.testclient import TestClient
from threadpoolctl import threadpool_limits

from service.api.app import create_app
from service.auth import create_token
from service.config import load_settings
from service.cv.scopes import INTERVAL_REPEAT_BASE
from service.jobs.local.driver import run_embedded
from service.jobs.queries.datasets import register_dataset
from service.store.db import make_engine, make_session_factory

# the server tests/conftest.py makes its databases on (same variables, same defaults)
PG_ADMIN = os.environ.get(
    "FOLDWISE_TEST_PG_ADMIN", "host=127.0.0.1 port=5432 user=postgres dbname=postgres"
)
PG_URL = os.environ.get("FOLDWISE_TEST_PG_URL", "postgresql+psycopg://postgres@127.0.0.1:5432")
K, REPETITIONS, INNER_K = 3, 2, 2
NESTED_JOB: dict[str, Any] = {
    "dataset": {"sample": "iris"},
    "target": "target",
    "task": "classification",
    "families": [
        {"estimator": "LogisticRegression", "fixed": {"max_iter": 500}, "grid": {"C": [0.1, 1.0]}}
    ],
    "outer": {"method": "stratified_kfold", "k": K, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": INNER_K, "seed": 1},
    "metrics": ["accuracy"],
    "interval": {"method": "nested", "repetitions": REPETITIONS},
}


@dataclass
class Finished:
    client: TestClient
    job_id: str
    result: dict[str, Any]


@pytest.fixture(scope="module", params=["sqlite", "postgresql"])
def finished(
    request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory
) -> Iterator[Finished]:
    """The nested-interval job run once per store, and an API client over that store."""
    env = {"FOLDWISE_HOME": str(tmp_path_factory.mktemp("home") / "home")}
    name = f"foldwise_test_{uuid.uuid4().hex[:12]}"
    if request.param == "postgresql":
        # made and dropped as tests/conftest.py's postgresql_url does, once for the module
        with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
            admin.execute(f'CREATE DATABASE "{name}"')
        env["FOLDWISE_DATABASE_URL"] = f"{PG_URL}/{name}"
    try:
        settings = load_settings(env)
        with threadpool_limits(1):
            outcome = run_embedded(NESTED_JOB, settings=settings, workers=2, base_dir=Path.cwd())
        engine = make_engine(settings.database_url)
        with make_session_factory(engine).begin() as session:
            # the embedded path runs as team "local" and registers the table for no team
            register_dataset(session, outcome.result["dataset_hash"], "local")
            token = create_token(session, team="local", scopes=["read"])
        engine.dispose()
        with TestClient(create_app(settings, local_workers=1)) as client:
            client.headers["Authorization"] = f"Bearer {token}"
            yield Finished(client, outcome.job_id, outcome.result)
    finally:
        if request.param == "postgresql":
            with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
                admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


def _listing(client: TestClient, path: str, **params: Any) -> list[dict[str, Any]]:
    rows: list[dict[str, Any]] = []
    after = 0
    while True:
        answer = client.get(path, params={**params, "after": after, "limit": 100})
        assert answer.status_code == 200, answer.text
        page = answer.json()
        rows += page["data"]
        if page["next_after"] is None:
            return rows
        after = page["next_after"]


def _place(row: dict[str, Any]) -> tuple[Any, ...]:
    return tuple(
        row[c] for c in ("role", "repeat", "fold", "inner_repeat", "inner_fold", "interval_part")
    )


def test_outer_rows_are_the_jobs_own_and_interval_rows_say_what_they_are(
    finished: Finished,
) -> None:
    rows = _listing(finished.client, f"/v1/jobs/{finished.job_id}/fold-scores")
    by_role: dict[str, list[dict[str, Any]]] = {}
    for row in rows:
        by_role.setdefault(row["role"], []).append(row)
    assert set(by_role) == {"outer", "inner", "final_inner", "interval_outer", "interval_inner"}
    # no reader-facing repeat is a stored procedure number
    assert all(r["repeat"] is None or r["repeat"] < INTERVAL_REPEAT_BASE for r in rows)

    # role=outer is the job's own outer folds: each (repeat, fold) of result v1, with its pick's
    # score equal to the one the estimate averages
    outer = by_role["outer"]
    assert {(r["repeat"], r["fold"]) for r in outer} == {
        (o["repeat"], o["fold"]) for o in finished.result["outer"]
    }
    for fold in finished.result["outer"]:
        (picked,) = [
            r
            for r in outer
            if (r["repeat"], r["fold"]) == (fold["repeat"], fold["fold"])
            and r["candidate_key"] == fold["pick"]["candidate_key"]
        ]
        assert picked["value"] == fold["scores"]["accuracy"]
        assert picked["interval_part"] is None
    assert all(r["interval_part"] is None for r in by_role["inner"])

    # the procedures, numbered as the interval numbers them: repetition r, outer fold o left
    # out, part j scored. Repetition 0 draws the job's own partition (same seed), so its
    # procedures fitted without one fold alone (j = o) are the job's outer folds, listed as outer.
    every = {(r, o, j) for r in range(REPETITIONS) for o in range(K) for j in range(K)}
    shared = {(0, o, o) for o in range(K)}
    interval_outer = by_role["interval_outer"]
    assert {(r["repeat"], r["fold"], r["interval_part"]) for r in interval_outer} == (
        every - shared
    )
    assert all(r["inner_repeat"] is None and r["inner_fold"] is None for r in interval_outer)
    # the procedures' own searches: inner folds of a procedure, which they name as the parent.
    # The procedures without folds o and j and without j and o fit the same rows, so they share
    # their inner folds, listed under the first (o < j).
    interval_inner = by_role["interval_inner"]
    parents = {(r["repeat"], r["fold"], r["interval_part"]) for r in interval_inner}
    assert parents == {(r, o, j) for r, o, j in every - shared if o <= j}
    assert {r["inner_fold"] for r in interval_inner} == set(range(INNER_K))
    assert finished.result["estimate"]["accuracy"]["interval"]["repetitions"] == REPETITIONS


def test_exports_carry_the_listings_roles_and_places(finished: Finished) -> None:
    client, job_id = finished.client, finished.job_id
    listed = {r["id"]: _place(r) for r in _listing(client, f"/v1/jobs/{job_id}/fold-scores")}
    as_csv = client.get(f"/v1/jobs/{job_id}/fold-scores.csv")
    assert as_csv.status_code == 200, as_csv.text
    csv_rows = list(csv.DictReader(io.StringIO(as_csv.text)))
    # added after the existing columns; halving_round was appended after it since
    assert list(csv_rows[0])[-2:] == ["interval_part", "halving_round"]

    def cell(value: str) -> Any:
        return None if value == "" else (value if not value.isdigit() else int(value))

    assert {
        int(r["id"]): tuple(
            cell(r[c])
            for c in ("role", "repeat", "fold", "inner_repeat", "inner_fold", "interval_part")
        )
        for r in csv_rows
    } == listed
    as_parquet = client.get(f"/v1/jobs/{job_id}/fold-scores.parquet")
    assert as_parquet.status_code == 200, as_parquet.text
    table = pq.read_table(io.BytesIO(as_parquet.content)).to_pylist()
    assert {r["id"]: _place(r) for r in table} == listed
    assert {json.loads(r["params"])["C"] for r in table} == {0.1, 1.0}


def test_the_dataset_role_filter_tells_the_interval_from_the_estimate(
    finished: Finished,
) -> None:
    client = finished.client
    dataset = finished.result["dataset_hash"]
    listed = _listing(client, f"/v1/jobs/{finished.job_id}/fold-scores")
    for role in ("outer", "interval_outer", "inner", "interval_inner"):
        found = _listing(client, f"/v1/datasets/{dataset}/fold-scores", role=role)
        # one job on the table: the filter picks exactly the rows the job lists under the role,
        # plus, for the interval's, the procedures that are also the job's own folds
        wanted = {r["id"] for r in listed if r["role"] == role}
        assert wanted and wanted <= {r["id"] for r in found}
        if role in ("outer", "inner"):
            assert {r["id"] for r in found} == wanted
    as_csv = client.get(f"/v1/datasets/{dataset}/fold-scores.csv", params={"role": "outer"})
    assert as_csv.status_code == 200, as_csv.text
    assert {int(r["id"]) for r in csv.DictReader(io.StringIO(as_csv.text))} == {
        r["id"] for r in listed if r["role"] == "outer"
    }


def test_provenance_marks_the_procedure_folds(finished: Finished) -> None:
    answer = finished.client.get(f"/v1/jobs/{finished.job_id}/provenance")
    assert answer.status_code == 200, answer.text
    folds = answer.json()["folds"]
    outer = [f for f in folds if f["role"] == "outer"]
    assert len(outer) == K and all(f["repeat"] < INTERVAL_REPEAT_BASE for f in outer)
    assert all("interval" not in f for f in folds if f["role"] in ("outer", "inner"))
    procedures = [f for f in folds if f["role"] == "interval_outer"]
    # every procedure is listed here, the shared ones too: provenance lists job_fold rows as
    # stored (scope, repeat, fold), which the units' scopes name
    assert {
        (f["interval"]["repetition"], f["interval"]["fold"], f["interval"]["part"])
        for f in procedures
    } == {(r, o, j) for r in range(REPETITIONS) for o in range(K) for j in range(K)}
    assert all(f["repeat"] >= INTERVAL_REPEAT_BASE for f in procedures)
    searches = [f for f in folds if f["role"] == "interval_inner"]
    assert searches and all(f["interval"]["repetition"] < REPETITIONS for f in searches)
