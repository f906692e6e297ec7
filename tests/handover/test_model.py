"""The final model handed over in skops' format, its model card, and who may fetch them.

References: scikit-learn's LogisticRegression refit by hand on breast_cancer (shipped with
scikit-learn) with the final pick's hyperparameters; skops' own trusted-type check.
"""

from __future__ import annotations

import base64
import copy
import hashlib

import numpy as np
import pytest
import skops.io as sio
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression

from .conftest import PROBA_JOB, Handover

ROUTES = (
    "model",
    "model-card",
    "model-card.md",
    "predictions",
    "predictions.csv",
    "predictions.parquet",
)


def test_model_loads_with_nothing_to_trust_and_predicts_like_a_refit(handover: Handover) -> None:
    job = handover.jobs["proba"]
    final = job["result"]["final_pick"]
    reader = handover.server.token("owners", scopes=("read",))
    with handover.server.client(reader) as client:
        answer = client.get(f"/v1/jobs/{job['id']}/model")
    assert answer.status_code == 200, answer.text
    data = answer.content
    digest = hashlib.sha256(data).hexdigest()
    assert digest == final["model_sha256"] == answer.headers["X-Model-Sha256"]
    assert (
        answer.headers["Repr-Digest"]
        == f"sha-256=:{base64.b64encode(bytes.fromhex(digest)).decode()}:"
    )
    assert sio.get_untrusted_types(data=data) == []
    assert answer.headers["X-Model-Untrusted-Types"] == ""
    model = sio.loads(data)  # nothing trusted beyond skops' defaults

    frame = load_breast_cancer(as_frame=True).frame
    X, y = frame.drop(columns="target").astype("float64"), frame["target"].to_numpy()
    assert final["estimator"] == "LogisticRegression"
    reference = LogisticRegression(**final["params"]).fit(X, y)
    assert np.array_equal(model.predict(X), reference.predict(X))
    assert np.array_equal(model.predict_proba(X), reference.predict_proba(X))


def test_a_model_with_an_imputer_reports_the_types_skops_asks_to_trust(handover: Handover) -> None:
    # skops 0.16 trusts no numpy.dtype, and SimpleImputer (preprocess "auto") keeps two
    job = handover.jobs["labels"]
    with handover.server.client(handover.token) as client:
        answer = client.get(f"/v1/jobs/{job['id']}/model")
    listed = sio.get_untrusted_types(data=answer.content)
    assert listed == ["numpy.dtype"]
    assert answer.headers["X-Model-Untrusted-Types"] == "numpy.dtype"
    frame = load_breast_cancer(as_frame=True).frame
    model = sio.loads(answer.content, trusted=listed)
    predicted = model.predict(frame.drop(columns="target").astype("float64"))
    assert set(np.unique(predicted)) <= {0, 1}


def test_the_model_card_says_what_the_result_says(handover: Handover) -> None:
    job = handover.jobs["proba"]
    result = job["result"]
    with handover.server.client(handover.token) as client:
        card = client.get(f"/v1/jobs/{job['id']}/model-card").json()
        markdown = client.get(f"/v1/jobs/{job['id']}/model-card.md")
    details = card["model_details"]
    assert details["model_sha256"] == result["final_pick"]["model_sha256"]
    assert (details["estimator"], details["params"]) == (
        result["final_pick"]["estimator"],
        result["final_pick"]["params"],
    )
    assert details["untrusted_types"] == []
    data = card["evaluation_data"]
    assert (data["dataset_hash"], data["n_rows"], data["target"], data["task"]) == (
        result["dataset_hash"],
        569,  # breast_cancer's rows as scikit-learn ships it
        "target",
        "classification",
    )
    assert card["metrics"]["estimate"] == result["estimate"]
    assert card["quantitative_analyses"]["optimism_gap"] == result["optimism_gap"]
    assert card["quantitative_analyses"]["pick_frequency"] == result["pick_frequency"]
    assert card["ethical_considerations"] == result["cautions"]
    assert details["versions"] == result["versions"]
    assert [c["name"] for c in card["inputs"]] == list(
        load_breast_cancer(as_frame=True).frame.drop(columns="target").columns
    )
    assert markdown.status_code == 200
    assert markdown.headers["content-type"].startswith("text/markdown")
    text = markdown.text
    for heading in (
        "## Model details",
        "## Intended use",
        "## Metrics",
        "## Ethical considerations",
    ):
        assert heading in text
    assert result["final_pick"]["model_sha256"] in text
    # each metric's row carries its interval as result v1 holds it (quick, level 0.9)
    for metric, row in result["estimate"].items():
        band = row["interval"]
        assert (
            f"| {metric} | {row['mean']:.4f} | {band['lower']:.4f} to {band['upper']:.4f} (90%) |"
            in text
        )
    assert "corrected resampled t (Nadeau & Bengio 2003" in text


@pytest.mark.parametrize("route", ROUTES)
def test_other_teams_get_404_and_a_read_token_may_download(handover: Handover, route: str) -> None:
    job_id = handover.jobs["proba"]["id"]
    outsider = handover.server.token("outsiders")
    with handover.server.client(outsider) as client:
        answer = client.get(f"/v1/jobs/{job_id}/{route}")
    assert answer.status_code == 404
    assert answer.headers["content-type"].startswith("application/problem+json")
    reader = handover.server.token("owners", scopes=("read",))
    with handover.server.client(reader) as client:
        assert client.get(f"/v1/jobs/{job_id}/{route}").status_code == 200


def test_a_job_that_did_not_succeed_answers_with_a_problem_saying_why(handover: Handover) -> None:
    body = copy.deepcopy(PROBA_JOB)
    body["outer"] = {**body["outer"], "seed": 7}  # other folds: nothing reused, work to cancel
    with handover.server.client(handover.token) as client:
        job = client.post("/v1/jobs", json=body).json()
        cancelled = client.post(f"/v1/jobs/{job['id']}/cancel")
        assert cancelled.json()["status"] == "cancelled"
        for route in ROUTES:
            answer = client.get(f"/v1/jobs/{job['id']}/{route}")
            assert answer.status_code == 409, route
            problem = answer.json()
            assert f"job {job['id']} is cancelled" in problem["detail"]
            assert "once the job has succeeded" in problem["detail"]
