"""A job with declared column types, a gapped time split, a recipe and weights, over HTTP: it
runs to the end on the live server and equals the same request run embedded elsewhere.

Table: iris (ships with scikit-learn) under the data root, with a month-first date column and a
weight column derived from row order.
"""

from __future__ import annotations

import copy
from datetime import date, timedelta
from pathlib import Path
from typing import Any

from sklearn.datasets import load_iris

from service.config import load_settings
from service.jobs.local.driver import run_embedded

from .server import Server


def _dated_iris(folder: Path) -> Path:
    frame = load_iris(as_frame=True).frame.sample(frac=1.0, random_state=4)
    start = date(2023, 12, 1)
    frame["when"] = [(start + timedelta(days=i)).strftime("%m/%d/%Y") for i in range(150)]
    frame["w"] = [1.0 + i % 3 for i in range(150)]
    path = folder / "dated_iris.csv"
    frame.to_csv(path, index=False)
    return path


def _request(path: Path) -> dict[str, Any]:
    return {
        "dataset": {"path": str(path)},
        "target": "target",
        "task": "classification",
        "families": [
            {
                "estimator": "LogisticRegression",
                "fixed": {"max_iter": 500},
                "grid": {"C": [0.1, 1.0], "select__k": [2, 4]},
            }
        ],
        "columns": {"when": {"kind": "datetime", "format": "%m/%d/%Y"}},
        "preprocess": {"numeric": {"impute": "mean"}, "select": {"method": "k_best"}},
        "weights": "w",
        "outer": {"method": "time_series", "k": 3, "order_by": "when", "gap": 5},
        "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
        "metrics": ["accuracy", "balanced_accuracy"],
    }


def test_declared_types_time_split_recipe_and_weights_over_http(
    server: Server, token: str, data_root: Path, tmp_path: Path
) -> None:
    request = _request(_dated_iris(data_root))
    with server.client(token) as client:
        answer = client.post("/v1/jobs", json=copy.deepcopy(request))
        assert answer.status_code == 202, answer.text
        job = server.wait_for_job(client, answer.json()["id"])
    assert job["status"] == "succeeded", job["error"]
    result = job["result"]
    assert len(result["outer"]) == 3
    assert any("outer split follows time" in c for c in result["cautions"])
    assert {row["pick"]["params"]["select__k"] for row in result["outer"]} <= {2, 4}
    settings = load_settings({"FOLDWISE_HOME": str(tmp_path / "embedded")})
    embedded = run_embedded(copy.deepcopy(request), settings=settings, workers=1).result
    for served, here in zip(result["outer"], embedded["outer"], strict=True):
        assert served["pick"] == here["pick"]
        assert served["scores"] == here["scores"]
    assert result["final_pick"]["candidate_key"] == embedded["final_pick"]["candidate_key"]
