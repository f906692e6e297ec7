"""Reuse never mixes scores made under another recipe, other weights or other column types
(embedded path, real PostgreSQL store, real fits).

Table: iris (ships with scikit-learn, Fisher 1936) written as CSV with a weight column derived
from row order, so every job below runs on the same dataset hash.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pytest
from sklearn.datasets import load_iris
from sqlalchemy import select
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.jobs.local.driver import run_embedded
from service.store.models import Job

from .conftest import make_request


@pytest.fixture
def weighted_iris(tmp_path: Path) -> Path:
    frame = load_iris(as_frame=True).frame
    frame["weight"] = 1.0 + (np.arange(len(frame)) % 4)
    frame["petal_code"] = (frame["petal width (cm)"] * 10).round().astype(int)
    path = tmp_path / "iris_weighted.csv"
    frame.to_csv(path, index=False)
    return path


# the same feature columns in every job, so only recipe, weights or column types differ
FEATURES = [*load_iris().feature_names, "petal_code"]


def _run(settings: Settings, path: Path, **changes: Any) -> Any:
    request = make_request(dataset={"path": str(path)}, features=FEATURES, **changes)
    return run_embedded(request, settings=settings, base_dir=path.parent)


def _outer(result: dict[str, Any]) -> list[float]:
    return [row["scores"]["accuracy"] for row in result["outer"]]


def test_each_recipe_weights_and_column_type_is_fitted_afresh_and_then_reused(
    pg_settings: Settings, pg_sessions: sessionmaker[Session], weighted_iris: Path
) -> None:
    variants: dict[str, dict[str, Any]] = {
        "auto": {},
        "weights": {"weights": "weight"},
        "recipe": {"preprocess": {"numeric": {"scale": False, "impute": "mean"}}},
        "recipe with selection": {"preprocess": {"select": {"method": "k_best", "k": 2}}},
        "column type": {"columns": {"petal_code": {"kind": "categorical"}}},
    }
    runs = {}
    for name, changes in variants.items():
        outcome = _run(pg_settings, weighted_iris, **changes)
        work = outcome.result["work"]
        # nothing taken from the jobs before: each variant's scores are its own
        assert work["units_reused"] == 0, name
        assert work["units_computed"] == work["units_total"], name
        runs[name] = outcome
    with pg_sessions() as session:
        hashes = set(session.scalars(select(Job.dataset_hash)))
    assert len(hashes) == 1  # the same table every time: only the keys kept them apart
    # the weighted job, asked again, takes everything from the store and scores the same
    again = _run(pg_settings, weighted_iris, weights="weight")
    assert again.result["work"]["fits"] == 0
    assert again.result["work"]["units_reused"] == again.result["work"]["units_total"]
    assert _outer(again.result) == _outer(runs["weights"].result)
    assert again.result["final_pick"] == runs["weights"].result["final_pick"]


def _run_problem(settings: Settings, path: Path, **changes: Any) -> Any:
    request = make_request(dataset={"path": str(path)}, **changes)
    return run_embedded(request, settings=settings, base_dir=path.parent)


def test_another_target_or_fewer_features_on_the_same_folds_is_fitted_afresh(
    pg_settings: Settings, weighted_iris: Path
) -> None:
    # A plain k-fold ignores the labels, so these jobs have the same fold fingerprints on the
    # same dataset hash; reusing one's scores for the other would report the wrong problem.
    plain = {
        "task": "regression",
        "families": [{"estimator": "Ridge", "grid": {"alpha": [0.1, 1.0]}}],
        "outer": {"method": "kfold", "k": 3},
        "inner": {"method": "kfold", "k": 2},
        "metrics": ["r2"],
    }
    width = ["sepal length (cm)", "sepal width (cm)", "petal length (cm)"]
    length = ["sepal length (cm)", "sepal width (cm)", "petal width (cm)"]
    first = _run_problem(
        pg_settings, weighted_iris, **plain, target="petal width (cm)", features=width
    )
    assert first.result["work"]["units_reused"] == 0
    for target, features in [("petal length (cm)", length), ("petal width (cm)", width[:2])]:
        other = _run_problem(pg_settings, weighted_iris, **plain, target=target, features=features)
        work = other.result["work"]
        assert work["units_reused"] == 0, (target, features)
        assert work["units_computed"] == work["units_total"], (target, features)
    again = _run_problem(
        pg_settings, weighted_iris, **plain, target="petal width (cm)", features=width
    )
    assert again.result["work"]["fits"] == 0
