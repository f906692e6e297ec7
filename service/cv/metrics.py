"""Metrics by scikit-learn scorer name; every one is 'higher is better' (errors are negated)."""

from __future__ import annotations

import difflib
from collections.abc import Callable
from typing import Any

from sklearn.metrics import check_scoring

from service.cv.errors import SpecError

CLASSIFICATION_METRICS = (
    "accuracy",
    "balanced_accuracy",
    "roc_auc",
    "roc_auc_ovr",
    "roc_auc_ovo",
    "average_precision",
    "neg_log_loss",
    "neg_brier_score",
    "f1",
    "f1_macro",
    "f1_weighted",
    "precision",
    "precision_macro",
    "recall",
    "recall_macro",
    "matthews_corrcoef",
)
REGRESSION_METRICS = (
    "r2",
    "explained_variance",
    "neg_mean_squared_error",
    "neg_root_mean_squared_error",
    "neg_mean_absolute_error",
    "neg_median_absolute_error",
    "neg_mean_absolute_percentage_error",
)
# these look at one positive class, so they are undefined with more than two classes
_BINARY_ONLY = {
    "roc_auc": "roc_auc_ovr",
    "average_precision": "roc_auc_ovr",
    "neg_brier_score": "neg_log_loss",
    "f1": "f1_macro",
    "precision": "precision_macro",
    "recall": "recall_macro",
}


def check_metrics(metrics: list[str], task: str, n_classes: int | None) -> None:
    """Refuse metric names that are unknown, for the other task, or binary-only on multiclass."""
    allowed = CLASSIFICATION_METRICS if task == "classification" else REGRESSION_METRICS
    for i, name in enumerate(metrics):
        field = f"metrics[{i}]"
        if name not in allowed:
            hint = difflib.get_close_matches(name, allowed, n=1)
            tip = f"did you mean {hint[0]!r}?" if hint else f"use one of {', '.join(allowed)}."
            raise SpecError(field, f"{name!r} is not a {task} metric here; {tip}")
        if n_classes is not None and n_classes > 2 and name in _BINARY_ONLY:
            raise SpecError(
                field,
                f"{name!r} needs two classes but the target has {n_classes}; "
                f"use {_BINARY_ONLY[name]!r} instead.",
            )


def make_scorer_set(estimator: Any, metrics: list[str]) -> Callable[..., dict[str, float]]:
    """One scorer for all metrics that shares predictions between them, as cross_validate does."""
    scorer = check_scoring(estimator, scoring=list(metrics))

    def score(fitted: Any, X: Any, y: Any, **weights: Any) -> dict[str, float]:
        # weights: an optional sample_weight, which scikit-learn hands to every scorer
        return {name: float(value) for name, value in scorer(fitted, X, y, **weights).items()}

    return score
