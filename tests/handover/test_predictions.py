"""Out-of-fold predictions over HTTP, re-scored with scikit-learn's own metric functions.

The reference is scikit-learn (accuracy_score, roc_auc_score, log_loss, f1_score,
balanced_accuracy_score, r2_score, mean_absolute_error, root_mean_squared_error) applied to the
exported rows; the tables are breast_cancer and diabetes as scikit-learn ships them.
"""

from __future__ import annotations

import io
from collections import defaultdict
from typing import Any

import httpx
import numpy as np
import pyarrow.parquet as pq
import pytest
from scipy import stats
from sklearn.datasets import load_breast_cancer, load_diabetes
from sklearn.metrics import (
    accuracy_score,
    balanced_accuracy_score,
    f1_score,
    log_loss,
    mean_absolute_error,
    r2_score,
    roc_auc_score,
    root_mean_squared_error,
)

from .conftest import Handover


def all_rows(client: httpx.Client, job_id: str, limit: int = 128) -> tuple[list[str], list[dict]]:
    """Every prediction row, read page by page with the keyset cursor."""
    rows: list[dict[str, Any]] = []
    after = 0
    while True:
        answer = client.get(
            f"/v1/jobs/{job_id}/predictions", params={"after": after, "limit": limit}
        )
        assert answer.status_code == 200, answer.text
        page = answer.json()
        assert len(page["data"]) <= limit
        rows += page["data"]
        if page["next_after"] is None:
            return page["columns"], rows
        after = page["next_after"]


def by_fold(rows: list[dict[str, Any]]) -> dict[tuple[int, int], list[dict[str, Any]]]:
    """Rows grouped by (repeat, fold), in the order they came."""
    out: dict[tuple[int, int], list[dict[str, Any]]] = defaultdict(list)
    for row in rows:
        out[(row["repeat"], row["fold"])].append(row)
    return out


def outer_scores(job: dict[str, Any]) -> dict[tuple[int, int], dict[str, float]]:
    """Result v1's outer fold scores by (repeat, fold)."""
    return {(r["repeat"], r["fold"]): r["scores"] for r in job["result"]["outer"]}


def test_rows_cover_every_outer_test_row_once_with_the_actual_target(handover: Handover) -> None:
    job = handover.jobs["proba"]
    with handover.server.client(handover.token) as client:
        columns, rows = all_rows(client, job["id"])
    target = load_breast_cancer().target  # scikit-learn's shipped table
    assert columns[:6] == ["row", "repeat", "fold", "candidate_key", "actual", "predicted"]
    assert sorted(r["row"] for r in rows) == list(range(len(target)))
    assert [r["actual"] for r in rows] == [int(target[r["row"]]) for r in rows]
    picks = {(o["repeat"], o["fold"]): o["pick"]["candidate_key"] for o in job["result"]["outer"]}
    assert all(r["candidate_key"] == picks[(r["repeat"], r["fold"])] for r in rows)
    sizes = {(o["repeat"], o["fold"]): o["n_test"] for o in job["result"]["outer"]}
    assert {k: len(v) for k, v in by_fold(rows).items()} == sizes


def test_probabilities_rescore_to_the_outer_fold_scores(handover: Handover) -> None:
    job = handover.jobs["proba"]
    with handover.server.client(handover.token) as client:
        columns, rows = all_rows(client, job["id"])
    assert {"proba_0", "proba_1", "decision"} <= set(columns)
    expected = outer_scores(job)
    for key, fold_rows in by_fold(rows).items():
        y = np.array([r["actual"] for r in fold_rows])
        predicted = np.array([r["predicted"] for r in fold_rows])
        proba_1 = np.array([r["proba_1"] for r in fold_rows])
        decision = np.array([r["decision"] for r in fold_rows])
        # scikit-learn's roc_auc scorer asks for decision_function before predict_proba, and
        # for a binary target its neg_log_loss scorer hands over the positive class's column
        assert accuracy_score(y, predicted) == expected[key]["accuracy"]
        assert roc_auc_score(y, decision) == expected[key]["roc_auc"]
        assert -log_loss(y, proba_1) == expected[key]["neg_log_loss"]
        rows_sum = np.array([[r["proba_0"], r["proba_1"]] for r in fold_rows]).sum(axis=1)
        assert np.allclose(rows_sum, 1.0)


def test_labels_without_probabilities_rescore_to_the_outer_fold_scores(handover: Handover) -> None:
    job = handover.jobs["labels"]
    with handover.server.client(handover.token) as client:
        columns, rows = all_rows(client, job["id"], limit=1000)
    assert not [c for c in columns if c.startswith("proba_")]  # LinearSVC has no probabilities
    expected = outer_scores(job)
    assert len(by_fold(rows)) == len(expected)
    for key, fold_rows in by_fold(rows).items():
        y = [r["actual"] for r in fold_rows]
        predicted = [r["predicted"] for r in fold_rows]
        assert accuracy_score(y, predicted) == expected[key]["accuracy"]
        assert f1_score(y, predicted) == expected[key]["f1"]
        assert balanced_accuracy_score(y, predicted) == expected[key]["balanced_accuracy"]


def test_regression_values_rescore_to_the_outer_fold_scores(handover: Handover) -> None:
    job = handover.jobs["regression"]
    with handover.server.client(handover.token) as client:
        _, rows = all_rows(client, job["id"], limit=50)
    target = load_diabetes().target  # scikit-learn's shipped table
    assert [r["actual"] for r in rows] == [float(target[r["row"]]) for r in rows]
    expected = outer_scores(job)
    for key, fold_rows in by_fold(rows).items():
        y = [r["actual"] for r in fold_rows]
        predicted = [r["predicted"] for r in fold_rows]
        assert r2_score(y, predicted) == expected[key]["r2"]
        assert -mean_absolute_error(y, predicted) == expected[key]["neg_mean_absolute_error"]
        assert (
            -root_mean_squared_error(y, predicted) == expected[key]["neg_root_mean_squared_error"]
        )


@pytest.mark.parametrize("name", ["proba", "regression"])
def test_csv_and_parquet_hold_the_json_rows(handover: Handover, name: str) -> None:
    job_id = handover.jobs[name]["id"]
    with handover.server.client(handover.token) as client:
        columns, rows = all_rows(client, job_id, limit=5000)
        as_csv = client.get(f"/v1/jobs/{job_id}/predictions.csv")
        as_parquet = client.get(f"/v1/jobs/{job_id}/predictions.parquet")
    assert as_csv.status_code == 200 and as_csv.headers["content-type"].startswith("text/csv")
    lines = as_csv.text.splitlines()
    assert lines[0].split(",") == columns
    assert len(lines) == len(rows) + 1
    table = pq.read_table(io.BytesIO(as_parquet.content)).to_pylist()
    assert table == rows


def test_slice_estimates_equal_scikit_learn_on_the_slice_rows(handover: Handover) -> None:
    job = handover.jobs["regression"]
    with handover.server.client(handover.token) as client:
        _, rows = all_rows(client, job["id"], limit=5000)
    table = load_diabetes(as_frame=True).frame  # scikit-learn's shipped table, sliced by sex
    sex = table["sex"].map(str).to_numpy()
    (piece,) = job["result"]["slices"]
    assert piece["column"] == "sex"
    assert sorted(g["value"] for g in piece["groups"]) == sorted(set(sex.tolist()))
    folds = by_fold(rows)
    for group in piece["groups"]:
        assert group["n_rows"] == int((sex == group["value"]).sum())
        r2_values, differences = [], []
        for key in sorted(folds):
            inside = [r for r in folds[key] if sex[r["row"]] == group["value"]]
            rest = [r for r in folds[key] if sex[r["row"]] != group["value"]]
            r2_inside = r2_score([r["actual"] for r in inside], [r["predicted"] for r in inside])
            r2_rest = r2_score([r["actual"] for r in rest], [r["predicted"] for r in rest])
            r2_values.append(r2_inside)
            differences.append(r2_inside - r2_rest)
        assert group["estimate"]["r2"]["values"] == r2_values
        assert group["estimate"]["r2"]["mean"] == float(np.mean(r2_values))
        assert group["differences"] == differences
        # the stated rule: a two-sided one-sample t-test of the differences, flagged below 0.05
        p_value = float(stats.ttest_1samp(differences, 0.0).pvalue)
        assert group["p_value"] == p_value
        assert group["flagged"] == (p_value < 0.05)


def test_slicing_by_the_target_gives_each_class_its_accuracy(handover: Handover) -> None:
    job = handover.jobs["proba"]
    with handover.server.client(handover.token) as client:
        _, rows = all_rows(client, job["id"], limit=5000)
    (piece,) = job["result"]["slices"]
    for group in piece["groups"]:
        label = int(float(group["value"]))  # the stored table keeps numbers as floats
        values = [
            accuracy_score(
                [r["actual"] for r in fold_rows if r["actual"] == label],
                [r["predicted"] for r in fold_rows if r["actual"] == label],
            )
            for _, fold_rows in sorted(by_fold(rows).items())
        ]
        assert group["estimate"]["accuracy"]["values"] == values
        # roc_auc is undefined on rows of one class (scikit-learn warns, gives NaN): not kept
        assert "roc_auc" not in group["estimate"]
