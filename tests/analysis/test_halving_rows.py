"""A halving search's round folds in every reader-facing row, on both stores.

Round folds are stored beside each search's inner folds with repeats from
scopes.ROUND_REPEAT_BASE up (1000 · (round + 1) + inner repeat); readers must see them as
`halving_inner` / `halving_final_inner`, with the plain inner repeat and the round in
`halving_round`, never as inner folds numbered 1000 and up. Checked through the API's fold-score
listing, the CSV and Parquet exports, the dataset-wide `role` filter and provenance, against the
rounds result v1 reports, on the small halving case of tests/engine/test_halving.py (load_wine,
which ships with scikit-learn; that file checks the case against HalvingGridSearchCV).
"""

from __future__ import annotations

import copy
import csv
import io
import os
import uuid
from collections import defaultdict
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import psycopg
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from engine.test_halving import CASES  # tests/engine: the halving requests checked against sklearn
from fastapi.testclient import TestClient
from threadpoolctl import threadpool_limits

from service.api.app import create_app
from service.auth import create_token
from service.config import load_settings
from service.cv.scopes import FINAL_SCOPE, ROUND_REPEAT_BASE, outer_scope
from service.jobs.local.driver import run_embedded
from service.jobs.queries.datasets import register_dataset
from service.store.db import make_engine, make_session_factory

# the server tests/conftest.py makes its databases on (same variables, same defaults)
PG_ADMIN = os.environ.get(
    "FOLDWISE_TEST_PG_ADMIN", "host=127.0.0.1 port=5432 user=postgres dbname=postgres"
)
PG_URL = os.environ.get("FOLDWISE_TEST_PG_URL", "postgresql+psycopg://postgres@127.0.0.1:5432")
CASE = CASES["wine-small"]  # 4 candidates raced in 3 outer searches and one on all rows
PLACE = ("role", "repeat", "fold", "inner_repeat", "inner_fold", "interval_part", "halving_round")
HALVING_ROLES = ("halving_inner", "halving_final_inner")
# a mean of the same fold scores summed in another order may differ in its last bits
TOLERANCE = 1e-12


@dataclass
class Finished:
    client: TestClient
    job_id: str
    result: dict[str, Any]


@pytest.fixture(scope="module", params=["sqlite", "postgresql"])
def finished(
    request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory
) -> Iterator[Finished]:
    """The halving job run once per store, and an API client over that store."""
    env = {"FOLDWISE_HOME": str(tmp_path_factory.mktemp("home") / "home")}
    name = f"foldwise_test_{uuid.uuid4().hex[:12]}"
    if request.param == "postgresql":
        # made and dropped as tests/conftest.py's postgresql_url does, once for the module
        with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
            admin.execute(f'CREATE DATABASE "{name}"')
        env["FOLDWISE_DATABASE_URL"] = f"{PG_URL}/{name}"
    try:
        settings = load_settings(env)
        with threadpool_limits(1):  # one BLAS thread, as the pool children use
            outcome = run_embedded(
                copy.deepcopy(CASE.request()), settings=settings, workers=2, base_dir=Path.cwd()
            )
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
        answer = client.get(path, params={**params, "after": after, "limit": 1000})
        assert answer.status_code == 200, answer.text
        page = answer.json()
        rows += page["data"]
        if page["next_after"] is None:
            return rows
        after = page["next_after"]


def _scope(row: dict[str, Any]) -> str:
    if row["role"] == "halving_final_inner":
        return FINAL_SCOPE
    return outer_scope(row["repeat"], row["fold"])


def _mean(values: list[float]) -> float:
    return sum(values) / len(values)


def test_round_folds_are_listed_as_rounds_and_add_up_to_the_results_rounds(
    finished: Finished,
) -> None:
    rows = _listing(finished.client, f"/v1/jobs/{finished.job_id}/fold-scores")
    roles = {row["role"] for row in rows}
    # a halving job scores only its round folds and outer folds: the plain inner folds it
    # stores beside the rounds are never fitted
    assert roles == {"outer", *HALVING_ROLES}
    assert all(r["inner_repeat"] is None or r["inner_repeat"] < ROUND_REPEAT_BASE for r in rows)
    assert all((r["halving_round"] is None) == (r["role"] == "outer") for r in rows)
    outer = [r for r in rows if r["role"] == "outer"]
    assert {(r["repeat"], r["fold"]) for r in outer} == {
        (o["repeat"], o["fold"]) for o in finished.result["outer"]
    }
    final = [r for r in rows if r["role"] == "halving_final_inner"]
    assert final and all(r["repeat"] is None and r["fold"] is None for r in final)

    # every round of every search as result v1 reports it, rebuilt from the listed rows of
    # the metric the race ranks by: the same candidates, fits, rows fitted on and best mean
    metric = finished.result["pick_by"]
    scored: dict[tuple[str, int], dict[str, dict[int, dict[str, Any]]]] = defaultdict(dict)
    for row in rows:
        if row["role"] in HALVING_ROLES and row["metric"] == metric:
            assert row["inner_repeat"] == 0 and 0 <= row["inner_fold"] < CASE.inner
            by_fold = scored[(_scope(row), row["halving_round"])].setdefault(
                row["candidate_key"], {}
            )
            assert row["inner_fold"] not in by_fold  # one score per candidate and fold
            by_fold[row["inner_fold"]] = row
    reported = finished.result["search"]["rounds"]
    assert set(scored) == {(r["scope"], r["round"]) for r in reported}
    for expected in reported:
        candidates = scored[(expected["scope"], expected["round"])]
        assert len(candidates) == expected["candidates"]
        assert sum(len(folds) for folds in candidates.values()) == expected["fits"]
        assert all(len(folds) == CASE.inner for folds in candidates.values())
        fitted_on = sum(r["n_train"] for folds in candidates.values() for r in folds.values())
        assert fitted_on == expected["train_rows"]
        means = {key: _mean([r["value"] for r in f.values()]) for key, f in candidates.items()}
        assert abs(max(means.values()) - expected["best_mean"]) <= TOLERANCE
        # the next round races the candidates this one kept: its best by mean
        following = scored.get((expected["scope"], expected["round"] + 1))
        if following is not None:
            assert len(following) == expected["kept"] and set(following) <= set(candidates)
            dropped = set(candidates) - set(following)
            assert min(means[k] for k in following) >= max(means[k] for k in dropped)


def test_exports_carry_the_listings_rounds_in_a_new_last_column(finished: Finished) -> None:
    client, job_id = finished.client, finished.job_id
    listed = {
        r["id"]: tuple(r[c] for c in PLACE)
        for r in _listing(client, f"/v1/jobs/{job_id}/fold-scores")
    }
    as_csv = client.get(f"/v1/jobs/{job_id}/fold-scores.csv")
    assert as_csv.status_code == 200, as_csv.text
    csv_rows = list(csv.DictReader(io.StringIO(as_csv.text)))
    # appended after the nested interval's column, which keeps its place before it
    assert list(csv_rows[0])[-2:] == ["interval_part", "halving_round"]

    def cell(value: str) -> Any:
        return None if value == "" else (int(value) if value.isdigit() else value)

    assert {int(r["id"]): tuple(cell(r[c]) for c in PLACE) for r in csv_rows} == listed
    as_parquet = client.get(f"/v1/jobs/{job_id}/fold-scores.parquet")
    assert as_parquet.status_code == 200, as_parquet.text
    table = pq.read_table(io.BytesIO(as_parquet.content))
    assert table.schema.names[-2:] == ["interval_part", "halving_round"]
    assert table.schema.field("halving_round").type == pa.int64()
    assert {r["id"]: tuple(r[c] for c in PLACE) for r in table.to_pylist()} == listed


def test_the_dataset_role_filter_takes_the_halving_roles(finished: Finished) -> None:
    client = finished.client
    dataset = finished.result["dataset_hash"]
    listed = _listing(client, f"/v1/jobs/{finished.job_id}/fold-scores")
    for role in ("outer", "inner", "final_inner", *HALVING_ROLES):
        found = _listing(client, f"/v1/datasets/{dataset}/fold-scores", role=role)
        # one job on the table: the filter picks exactly the rows the job lists under the role;
        # inner and final_inner are the plain inner folds, which a halving job never scores
        wanted = {r["id"] for r in listed if r["role"] == role}
        assert {r["id"] for r in found} == wanted
        assert bool(wanted) == (role not in ("inner", "final_inner"))
    as_csv = client.get(
        f"/v1/datasets/{dataset}/fold-scores.csv", params={"role": "halving_final_inner"}
    )
    assert as_csv.status_code == 200, as_csv.text
    assert {int(r["id"]) for r in csv.DictReader(io.StringIO(as_csv.text))} == {
        r["id"] for r in listed if r["role"] == "halving_final_inner"
    }
    # a role no reader sees is refused as before: a problem naming the field
    refused = client.get(f"/v1/datasets/{dataset}/fold-scores", params={"role": "halving"})
    assert refused.status_code == 422
    assert refused.headers["content-type"].startswith("application/problem+json")
    assert refused.json()["field"] == "role"


def test_provenance_marks_the_round_folds(finished: Finished) -> None:
    answer = finished.client.get(f"/v1/jobs/{finished.job_id}/provenance")
    assert answer.status_code == 200, answer.text
    trail = answer.json()
    folds = trail["folds"]
    rounds = [f for f in folds if f["role"] in HALVING_ROLES]
    # stored numbers stay as stored; `halving` decodes them
    assert rounds and all(f["repeat"] >= ROUND_REPEAT_BASE for f in rounds)
    for fold in rounds:
        assert (
            fold["repeat"]
            == ROUND_REPEAT_BASE * (fold["halving"]["round"] + 1)
            + (fold["halving"]["inner_repeat"])
        )
        assert (fold["role"] == "halving_final_inner") == (fold["scope"] == FINAL_SCOPE)
    reported = {(r["scope"], r["round"]) for r in finished.result["search"]["rounds"]}
    # every round of the plan has its folds, one per inner fold
    placed = defaultdict(set)
    for fold in rounds:
        placed[(fold["scope"], fold["halving"]["round"])].add(fold["fold"])
    assert set(placed) == reported
    assert all(found == set(range(CASE.inner)) for found in placed.values())
    plain = [f for f in folds if f["role"] in ("inner", "final_inner")]
    assert plain and all("halving" not in f and f["repeat"] < ROUND_REPEAT_BASE for f in plain)
    # the units say their round too: each search's round r has as many as it had candidates
    units = defaultdict(int)
    for unit in trail["units"]:
        if unit["kind"] == "inner":
            units[(unit["scope"], unit["halving_round"])] += 1
    assert units == {
        (r["scope"], r["round"]): r["candidates"] for r in finished.result["search"]["rounds"]
    }
