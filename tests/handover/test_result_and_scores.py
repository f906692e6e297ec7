"""Result v1 lists its candidates; fold-score rows carry their place and candidate; a job's
listing and exports hold only the metrics it asked for."""

from __future__ import annotations

import csv
import io
import json
from typing import Any

import pyarrow.parquet as pq

from .conftest import PROBA_JOB, Handover


def _scores(handover: Handover, job_id: str, **params: Any) -> list[dict[str, Any]]:
    rows: list[dict[str, Any]] = []
    after = 0
    with handover.server.client(handover.token) as client:
        while True:
            answer = client.get(
                f"/v1/jobs/{job_id}/fold-scores", params={"after": after, "limit": 1000, **params}
            )
            assert answer.status_code == 200, answer.text
            page = answer.json()
            rows += page["data"]
            if page["next_after"] is None:
                return rows
            after = page["next_after"]


def test_result_lists_every_candidate_as_provenance_does(handover: Handover) -> None:
    job = handover.jobs["proba"]
    with handover.server.client(handover.token) as client:
        trail = client.get(f"/v1/jobs/{job['id']}/provenance").json()
    listed = job["result"]["candidates"]
    assert listed == [
        {"candidate_key": c["candidate_key"], "estimator": c["estimator"], "params": c["params"]}
        for c in sorted(trail["candidates"], key=lambda c: c["position"])
    ]
    assert [c["params"]["C"] for c in listed] == [0.1, 1.0]  # the grid, in request order
    picked = {o["pick"]["candidate_key"] for o in job["result"]["outer"]}
    assert picked <= {c["candidate_key"] for c in listed}


def test_fold_score_rows_say_where_the_fold_sits_and_which_candidate(handover: Handover) -> None:
    job = handover.jobs["proba"]
    rows = _scores(handover, job["id"])
    params = {c["candidate_key"]: c["params"] for c in job["result"]["candidates"]}
    assert {r["role"] for r in rows} == {"outer", "inner", "final_inner"}
    for row in rows:
        assert row["params"] == params[row["candidate_key"]]
        assert row["estimator"] == "LogisticRegression"
        if row["role"] == "outer":
            assert row["inner_fold"] is None and row["fold"] in (0, 1, 2)
        elif row["role"] == "inner":
            assert row["fold"] in (0, 1, 2) and row["inner_fold"] in (0, 1, 2)
        else:
            assert row["fold"] is None and row["inner_fold"] in (0, 1, 2)
    # each outer row's pick score is the outer fold score of result v1
    outer = {
        (r["repeat"], r["fold"], r["candidate_key"], r["metric"]): r["value"]
        for r in rows
        if r["role"] == "outer"
    }
    for fold in job["result"]["outer"]:
        for metric, value in fold["scores"].items():
            key = (fold["repeat"], fold["fold"], fold["pick"]["candidate_key"], metric)
            assert outer[key] == value


def test_exports_hold_only_the_jobs_metrics_unless_asked(handover: Handover) -> None:
    job = handover.jobs["proba"]
    later = handover.jobs["more_metrics"]  # the same folds and candidates, one metric more
    assert later["result"]["work"]["units_reused"] > 0
    own = set(job["result"]["metrics"])
    assert {r["metric"] for r in _scores(handover, job["id"])} == own
    everything = {r["metric"] for r in _scores(handover, job["id"], all_metrics="true")}
    assert everything == own | {"balanced_accuracy"}
    with handover.server.client(handover.token) as client:
        as_csv = client.get(f"/v1/jobs/{job['id']}/fold-scores.csv").text
        as_parquet = client.get(f"/v1/jobs/{job['id']}/fold-scores.parquet").content
        all_csv = client.get(
            f"/v1/jobs/{job['id']}/fold-scores.csv", params={"all_metrics": "true"}
        ).text
    csv_rows = list(csv.DictReader(io.StringIO(as_csv)))
    assert {r["metric"] for r in csv_rows} == own
    assert {"role", "repeat", "fold", "inner_repeat", "inner_fold", "params"} <= set(csv_rows[0])
    assert all(json.loads(r["params"])["C"] in (0.1, 1.0) for r in csv_rows)
    assert {r["metric"] for r in csv.DictReader(io.StringIO(all_csv))} == everything
    table = pq.read_table(io.BytesIO(as_parquet)).to_pylist()
    assert {r["metric"] for r in table} == own
    assert len(table) == len(csv_rows)


def test_a_slice_column_with_too_many_values_is_refused_and_nothing_stored(
    handover: Handover,
) -> None:
    body = {**PROBA_JOB, "slices": ["mean radius"]}  # breast_cancer: hundreds of distinct radii
    before = handover.server.count_jobs()
    with handover.server.client(handover.token) as client:
        answer = client.post("/v1/jobs", json=body)
    assert answer.status_code == 422
    problem = answer.json()
    assert problem["field"] == "slices[0]"
    assert "distinct values" in problem["detail"] and "at most 20" in problem["detail"]
    assert handover.server.count_jobs() == before
