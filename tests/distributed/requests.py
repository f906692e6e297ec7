"""Job requests for the distributed tests, and what their plans imply."""

from __future__ import annotations

from typing import Any


def small_request() -> dict[str, Any]:
    """A quick job: 4 candidates, 3 outer x 3 inner folds, two metrics (16 + 4 units)."""
    return {
        "dataset": {"sample": "breast_cancer"},
        "target": "target",
        "task": "classification",
        "families": [
            {
                "estimator": "LogisticRegression",
                "fixed": {"max_iter": 2000},
                "grid": {"C": [0.1, 1.0]},
            },
            {
                "estimator": "DecisionTreeClassifier",
                "fixed": {"random_state": 0},
                "grid": {"max_depth": [2, 6]},
            },
        ],
        "outer": {"method": "stratified_kfold", "k": 3, "seed": 2},
        "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
        "metrics": ["accuracy", "roc_auc"],
        "pick_by": "accuracy",
    }


def slow_request() -> dict[str, Any]:
    """Forests big enough that a unit takes about a second: a kill lands mid-job."""
    return {
        **small_request(),
        "families": [
            {
                "estimator": "RandomForestClassifier",
                "fixed": {"n_estimators": 120, "random_state": 0},
                "grid": {"max_depth": [3, None], "min_samples_leaf": [1, 4]},
            },
        ],
    }


def on_own_folds(request: dict[str, Any], seed: int) -> dict[str, Any]:
    """The request with other outer and inner splits (seeded `seed`, `seed + 1`).

    Stored scores are reused by fold and candidate across jobs (service/jobs/execution/reuse.py),
    so a job on a stack shared with another test's job of the same request would fit nothing;
    on its own folds it fits every unit itself, as on a stack of its own.
    """
    return {
        **request,
        "outer": {**request["outer"], "seed": seed},
        "inner": {**request["inner"], "seed": seed + 1},
    }


def expected_scores(request: dict[str, Any], candidates: int) -> int:
    """Fold-score rows a finished job holds, computed from its plan.

    Every candidate on every inner fold of every outer training part and of the final
    (all-rows) inner split, plus each outer fold's pick scored on its test part; all per metric.
    """
    metrics = len(request["metrics"])
    outer_k, inner_k = request["outer"]["k"], request["inner"]["k"]
    return metrics * candidates * (outer_k * inner_k + inner_k) + metrics * outer_k
