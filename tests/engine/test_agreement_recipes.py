"""Recipes, transformed targets, weights and gapped time splits agree with scikit-learn, fold for
fold, to 1e-9, on tables that ship with scikit-learn.

scikit-learn as the reference implementation: GridSearchCV inside cross_validate, with the same
pipeline, splits and seeds, built here from scikit-learn alone (nothing of ours makes it).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import pytest
from sklearn import config_context, datasets
from sklearn.compose import ColumnTransformer, TransformedTargetRegressor
from sklearn.feature_selection import SelectKBest, f_regression
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.metrics import get_scorer
from sklearn.model_selection import (
    GridSearchCV,
    KFold,
    StratifiedKFold,
    TimeSeriesSplit,
    cross_validate,
)
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import PowerTransformer, StandardScaler

from .runs import outer_scores, run_engine

TOLERANCE = 1e-9
ALPHA_GRID = [0.1, 1.0, 10.0]


def diabetes() -> tuple[pd.DataFrame, pd.Series]:
    """The diabetes table that ships with scikit-learn (sklearn.datasets.load_diabetes)."""
    X, y = datasets.load_diabetes(return_X_y=True, as_frame=True)
    return X, y


def cancer_with_weights() -> tuple[pd.DataFrame, pd.Series, np.ndarray]:
    """Breast cancer (ships with scikit-learn) with weights derived from row order: 1, 2, 3, ..."""
    X, y = datasets.load_breast_cancer(return_X_y=True, as_frame=True)
    weights = 1.0 + (np.arange(len(y)) % 3)
    return X, y, weights


def scaled(columns: list[str], model: Any, *, weighted: bool = False) -> Pipeline:
    """Median imputation and standardisation of numeric columns, then `model`."""
    scale = StandardScaler()
    if weighted:
        scale.set_fit_request(sample_weight=True)
        model.set_fit_request(sample_weight=True)
    numeric = Pipeline([("impute", SimpleImputer(strategy="median")), ("scale", scale)])
    return Pipeline(
        [("preprocess", ColumnTransformer([("numeric", numeric, columns)])), ("model", model)]
    )


@dataclass(frozen=True)
class Reference:
    outer: dict[str, np.ndarray]
    best_scores: np.ndarray
    best_params: list[dict[str, Any]]
    final_score: float


def nested_reference(
    estimator: Any,
    grid: dict[str, list[Any]],
    X: pd.DataFrame,
    y: Any,
    outer_cv: Any,
    inner_cv: Any,
    metrics: list[str],
    weights: np.ndarray | None = None,
) -> Reference:
    """scikit-learn's nested CV: GridSearchCV (scored by the first metric) in cross_validate."""
    scoring: Any = metrics
    params: dict[str, Any] = {}
    if weights is not None:
        # metadata routing: every fit that asked for sample_weight gets it, and every scorer
        scoring = {m: get_scorer(m).set_score_request(sample_weight=True) for m in metrics}
        params = {"sample_weight": weights}
    search = GridSearchCV(estimator, grid, cv=inner_cv, scoring=scoring, refit=metrics[0])
    nested = cross_validate(
        search, X, y, cv=outer_cv, scoring=scoring, params=params, return_estimator=True
    )
    final = GridSearchCV(estimator, grid, cv=inner_cv, scoring=scoring, refit=metrics[0])
    final.fit(X, y, **params)
    return Reference(
        outer={m: np.asarray(nested[f"test_{m}"]) for m in metrics},
        best_scores=np.array([s.best_score_ for s in nested["estimator"]]),
        best_params=[s.best_params_ for s in nested["estimator"]],
        final_score=float(final.best_score_),
    )


def check(result: dict[str, Any], ref: Reference, names: dict[str, str]) -> None:
    """Outer scores, each outer fold's inner best score and pick, and the final search score."""
    for metric, expected in ref.outer.items():
        np.testing.assert_allclose(
            outer_scores(result, metric), expected, rtol=0, atol=TOLERANCE, err_msg=metric
        )
    inner = np.array([row["inner_mean"] for row in result["outer"]])
    np.testing.assert_allclose(inner, ref.best_scores, rtol=0, atol=TOLERANCE)
    for row, best in zip(result["outer"], ref.best_params, strict=True):
        for theirs, ours in names.items():
            assert row["pick"]["params"][ours] == best[theirs], (row["pick"], best)
    assert abs(result["final_pick"]["inner_mean"] - ref.final_score) < TOLERANCE


def _request(sample: str, task: str, families: list[dict[str, Any]], **extra: Any) -> dict:
    return {
        "dataset": {"sample": sample},
        "target": "target",
        "task": task,
        "families": families,
        **extra,
    }


def test_feature_selection_inside_the_folds_matches_scikit_learn() -> None:
    request = _request(
        "diabetes",
        "regression",
        [{"estimator": "Ridge", "grid": {"alpha": ALPHA_GRID, "select__k": [3, 6, 10]}}],
        preprocess={"select": {"method": "k_best", "score_func": "f_regression"}},
        outer={"method": "kfold", "k": 4, "seed": 0},
        inner={"method": "kfold", "k": 3, "seed": 1},
        metrics=["neg_mean_squared_error", "r2"],
    )
    result = run_engine(request).result
    X, y = diabetes()
    pipeline = scaled(list(X.columns), Ridge(random_state=0))
    pipeline.steps.insert(1, ("select", SelectKBest(f_regression)))
    # scikit-learn as the reference: SelectKBest refit inside every inner and outer fold
    ref = nested_reference(
        pipeline,
        {"model__alpha": ALPHA_GRID, "select__k": [3, 6, 10]},
        X,
        y,
        KFold(4, shuffle=True, random_state=0),
        KFold(3, shuffle=True, random_state=1),
        ["neg_mean_squared_error", "r2"],
    )
    check(result, ref, {"model__alpha": "alpha", "select__k": "select__k"})


@pytest.mark.parametrize("transform", ["log1p", "power"])
def test_transformed_target_matches_scikit_learn(transform: str) -> None:
    request = _request(
        "diabetes",
        "regression",
        [{"estimator": "Ridge", "grid": {"alpha": ALPHA_GRID}}],
        preprocess={"target": transform},
        outer={"method": "kfold", "k": 4, "seed": 3},
        inner={"method": "kfold", "k": 3},
        metrics=["neg_mean_absolute_error", "r2"],
    )
    result = run_engine(request).result
    X, y = diabetes()
    inner = scaled(list(X.columns), Ridge(random_state=0))
    if transform == "log1p":
        model = TransformedTargetRegressor(
            regressor=inner, func=np.log1p, inverse_func=np.expm1, check_inverse=False
        )
    else:
        model = TransformedTargetRegressor(regressor=inner, transformer=PowerTransformer())
    # scikit-learn as the reference: TransformedTargetRegressor around the same pipeline
    ref = nested_reference(
        model,
        {"regressor__model__alpha": ALPHA_GRID},
        X,
        y,
        KFold(4, shuffle=True, random_state=3),
        KFold(3),
        ["neg_mean_absolute_error", "r2"],
    )
    check(result, ref, {"regressor__model__alpha": "alpha"})


def test_observation_weights_match_scikit_learn() -> None:
    X, y, weights = cancer_with_weights()
    frame = X.assign(target=y, weight=weights)
    request = _request(
        "breast_cancer",
        "classification",
        [
            {
                "estimator": "LogisticRegression",
                "fixed": {"max_iter": 5000},
                "grid": {"C": [0.01, 0.1, 1.0]},
            }
        ],
        weights="weight",
        outer={"method": "stratified_kfold", "k": 4, "seed": 2},
        inner={"method": "stratified_kfold", "k": 3, "seed": 1},
        metrics=["accuracy", "roc_auc", "neg_log_loss"],
    )
    result = run_engine(request, frame).result
    with config_context(enable_metadata_routing=True):
        pipeline = scaled(
            list(X.columns), LogisticRegression(max_iter=5000, random_state=0), weighted=True
        )
        # scikit-learn as the reference: sample_weight routed to the scaler, the model and
        # every scorer (metadata routing), in the search and in cross_validate
        ref = nested_reference(
            pipeline,
            {"model__C": [0.01, 0.1, 1.0]},
            X,
            y,
            StratifiedKFold(4, shuffle=True, random_state=2),
            StratifiedKFold(3, shuffle=True, random_state=1),
            ["accuracy", "roc_auc", "neg_log_loss"],
            weights=weights,
        )
    check(result, ref, {"model__C": "C"})
    # the weights changed the numbers: the unweighted job scores differently
    unweighted = run_engine({k: v for k, v in request.items() if k != "weights"}, frame)
    assert outer_scores(unweighted.result, "neg_log_loss").tolist() != pytest.approx(
        outer_scores(result, "neg_log_loss").tolist(), abs=1e-6
    )


def test_time_split_with_a_gap_matches_scikit_learn() -> None:
    X, y = diabetes()
    # a day column derived from row order, then the rows shuffled: the engine must sort by it
    days = pd.Series(pd.date_range("2020-01-01", periods=len(y), freq="D"), name="day")
    frame = X.assign(target=y, day=days).sample(frac=1.0, random_state=0).reset_index(drop=True)
    request = _request(
        "diabetes",
        "regression",
        [{"estimator": "Ridge", "grid": {"alpha": ALPHA_GRID}}],
        outer={"method": "time_series", "k": 4, "order_by": "day", "gap": 10, "test_size": 60},
        inner={"method": "time_series", "k": 3, "order_by": "day", "gap": 5, "max_train_size": 150},
        metrics=["neg_mean_squared_error", "r2"],
    )
    result = run_engine(request, frame).result
    # scikit-learn as the reference: TimeSeriesSplit with the same arguments, on rows in time
    # order (diabetes as shipped, whose row order the day column follows)
    ref = nested_reference(
        scaled(list(X.columns), Ridge(random_state=0)),
        {"model__alpha": ALPHA_GRID},
        X,
        y,
        TimeSeriesSplit(n_splits=4, gap=10, test_size=60),
        TimeSeriesSplit(n_splits=3, gap=5, max_train_size=150),
        ["neg_mean_squared_error", "r2"],
    )
    check(result, ref, {"model__alpha": "alpha"})
