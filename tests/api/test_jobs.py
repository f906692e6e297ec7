"""A job submitted over HTTP runs to the end and matches the embedded run fold for fold."""

from __future__ import annotations

import copy
import csv
import io
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import func, select

from service.config import load_settings
from service.jobs.local.driver import run_embedded
from service.store.models import FoldScore, WorkUnit

from .server import IRIS_REQUEST, Server


def test_finished_job_reports_progress_result_and_links(finished_job: dict[str, Any]) -> None:
    job = finished_job["job"]
    assert job["progress"]["units_done"] == job["progress"]["units_total"] > 0
    assert job["progress"]["fraction"] == 1.0
    assert job["started_at"] and job["finished_at"] and job["error"] is None
    assert job["result"]["dataset_hash"] == job["dataset_hash"]
    assert job["links"]["job"] == f"/v1/jobs/{job['id']}"
    assert job["links"]["dataset"] == f"/v1/datasets/{job['dataset_hash']}"


def test_result_over_http_equals_the_embedded_run(
    finished_job: dict[str, Any], tmp_path: Path
) -> None:
    """The same request run embedded in another FOLDWISE_HOME gives the same folds and pick."""
    served = finished_job["job"]["result"]
    settings = load_settings({"FOLDWISE_HOME": str(tmp_path / "embedded")})
    embedded = run_embedded(copy.deepcopy(IRIS_REQUEST), settings=settings, workers=1).result
    assert served["dataset_hash"] == embedded["dataset_hash"]
    assert len(served["outer"]) == len(embedded["outer"]) == 3
    for over_http, here in zip(served["outer"], embedded["outer"], strict=True):
        assert (over_http["repeat"], over_http["fold"]) == (here["repeat"], here["fold"])
        assert over_http["pick"] == here["pick"]
        assert over_http["inner_mean"] == here["inner_mean"]
        assert over_http["scores"] == here["scores"]
    for key in ("candidate_key", "estimator", "params", "inner_mean", "model_sha256"):
        assert served["final_pick"][key] == embedded["final_pick"][key]
    assert served["estimate"] == embedded["estimate"]


def test_fold_scores_keyset_pages_and_csv_agree(
    server: Server, finished_job: dict[str, Any]
) -> None:
    job_id = finished_job["job"]["id"]
    with server.client(finished_job["token"]) as client:
        paged: list[dict[str, Any]] = []
        after, pages = 0, 0
        while True:
            page = client.get(f"/v1/jobs/{job_id}/fold-scores", params={"after": after, "limit": 7})
            assert page.status_code == 200
            body = page.json()
            paged += body["data"]
            pages += 1
            if body["next_after"] is None:
                break
            assert body["next_after"] == body["data"][-1]["id"]
            after = body["next_after"]
        exported = client.get(f"/v1/jobs/{job_id}/fold-scores.csv")
    ids = [row["id"] for row in paged]
    assert pages > 1 and ids == sorted(set(ids))
    # 2 candidates x (3 outer x 3 inner + 3 final inner) folds + the 3 outer refits, 2 metrics
    assert len(paged) == (2 * (9 + 3) + 3) * 2
    assert exported.status_code == 200
    assert exported.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(exported.text)))
    assert [int(r["id"]) for r in rows] == ids
    for row, item in zip(rows, paged, strict=True):
        assert set(row) == set(item)
        assert float(row["value"]) == item["value"]
        assert row["created_at"] == item["created_at"]
        assert row["fold_fingerprint"] == item["fold_fingerprint"]
        # the job that computed the score: an earlier job on the same folds may have; another
        # team's job is hidden, null in JSON and an empty cell in CSV
        assert row["job_id"] == (item["job_id"] or "")


def test_list_filters_by_dataset_status_and_time(
    server: Server, finished_job: dict[str, Any]
) -> None:
    job = finished_job["job"]
    with server.client(finished_job["token"]) as client:
        mine = client.get("/v1/jobs", params={"dataset_hash": job["dataset_hash"]}).json()
        succeeded = client.get("/v1/jobs", params={"status": "succeeded"}).json()
        queued = client.get("/v1/jobs", params={"status": "queued"}).json()
        later = client.get("/v1/jobs", params={"created_after": job["finished_at"]}).json()
        earlier = client.get("/v1/jobs", params={"created_before": job["finished_at"]}).json()
        page = client.get("/v1/jobs", params={"limit": 1, "offset": 0}).json()
    assert job["id"] in [j["id"] for j in mine["data"]]
    assert job["id"] in [j["id"] for j in succeeded["data"]]
    assert job["id"] not in [j["id"] for j in queued["data"]]
    assert job["id"] not in [j["id"] for j in later["data"]]
    assert job["id"] in [j["id"] for j in earlier["data"]]
    assert len(page["data"]) == 1 and page["count"] >= 1


@pytest.mark.parametrize(
    ("params", "field"),
    [({"limit": 201}, "limit"), ({"status": "done"}, "status"), ({"offset": -1}, "offset")],
)
def test_list_refuses_bad_query_parameters(
    server: Server, token: str, params: dict[str, Any], field: str
) -> None:
    with server.client(token) as client:
        answer = client.get("/v1/jobs", params=params)
    assert answer.status_code == 422
    assert answer.headers["content-type"] == "application/problem+json"
    assert answer.json()["field"] == field


def test_cancel_stops_a_job_and_leaves_finished_ones(
    server: Server, token: str, iris_request: dict[str, Any], finished_job: dict[str, Any]
) -> None:
    # forests big enough that the job cannot finish between the submit and the cancel
    iris_request["families"] = [
        {
            "estimator": "RandomForestClassifier",
            "fixed": {"n_estimators": 300, "random_state": 0},
            "grid": {"max_depth": [2, 4, None], "min_samples_leaf": [1, 3]},
        }
    ]
    with server.client(token) as client:
        job = client.post("/v1/jobs", json=iris_request).json()
        cancelled = client.post(f"/v1/jobs/{job['id']}/cancel")
        again = client.get(f"/v1/jobs/{job['id']}").json()
    assert cancelled.status_code == 200
    assert cancelled.json()["status"] == "cancelled"
    assert again["status"] == "cancelled" and again["result"] is None
    finished = finished_job["job"]
    with server.client(finished_job["token"]) as client:
        kept = client.post(f"/v1/jobs/{finished['id']}/cancel").json()
    assert kept["status"] == "succeeded" and kept["result"] is not None


def test_the_servers_pool_runs_fast_units_in_batches_each_with_its_own_scores(
    server: Server, token: str
) -> None:
    # eight nearest-neighbour candidates, outer 2 x inner 2: 24 inner units of two fits, far
    # cheaper to fit than to claim and record one by one (service/cv/unit_batches.py)
    request = {
        "dataset": {"sample": "iris"},
        "target": "target",
        "task": "classification",
        "families": [
            {"estimator": "KNeighborsClassifier", "grid": {"n_neighbors": list(range(1, 17, 2))}}
        ],
        "outer": {"method": "stratified_kfold", "k": 2, "seed": 7},
        "inner": {"method": "stratified_kfold", "k": 2, "seed": 8},
        "metrics": ["accuracy"],
        "reuse": False,
    }
    with server.client(token) as client:
        answer = client.post("/v1/jobs", json=request)
        assert answer.status_code == 202, answer.text
        job = server.wait_for_job(client, answer.json()["id"])
    assert job["status"] == "succeeded", job["error"]
    with server.sessions() as session:
        units = session.execute(
            select(WorkUnit.claim_token, WorkUnit.attempts, WorkUnit.fits).where(
                WorkUnit.job_id == job["id"]
            )
        ).all()
        scores = session.scalar(
            select(func.count()).select_from(FoldScore).where(FoldScore.job_id == job["id"])
        )
    assert len(units) == 24 + 3  # and the two outer refits and the final refit
    assert all(attempts == 1 for _, attempts, _ in units)
    # the 24 inner units in at most eight claims (a batch holds at most an eighth of the work),
    # the three refits in at most three
    tokens = {claim for claim, _, _ in units}
    assert None not in tokens and len(tokens) <= 8 + 3, len(tokens)
    # every fit's score once, each with its own unit: 8 candidates x 2 folds in each of the
    # three inner scopes, and the two outer folds' test scores
    assert sum(fits for _, _, fits in units) == 24 * 2 + 3
    assert scores == 8 * 2 * 3 + 2
