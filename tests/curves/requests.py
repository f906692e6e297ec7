"""The learning-curve request the tests share: breast cancer, a cheap family, k = 3 throughout."""

from __future__ import annotations

import copy
from typing import Any

SIZES = [0.1, 0.25, 0.5, 1.0]

# breast cancer Wisconsin (diagnostic), a table that ships with scikit-learn: 569 rows,
# 212 malignant / 357 benign (Street, Wolberg & Mangasarian 1993)
SELECTION: dict[str, Any] = {
    "dataset": {"sample": "breast_cancer"},
    "target": "target",
    "task": "classification",
    "families": [
        {"estimator": "LogisticRegression", "fixed": {"max_iter": 1000}, "grid": {"C": [0.1, 1.0]}}
    ],
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
    "metrics": ["accuracy", "neg_log_loss"],
    "pick_by": "accuracy",
}


def selection(**changes: Any) -> dict[str, Any]:
    """An ordinary selection request (a fresh copy) with `changes`."""
    body = copy.deepcopy(SELECTION)
    body.update(changes)
    return body


def curve(**changes: Any) -> dict[str, Any]:
    """A learning-curve request over SIZES with `changes`."""
    return selection(**({"kind": "learning_curve", "sizes": list(SIZES)} | changes))
