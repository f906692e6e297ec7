"""Nested CV agrees with scikit-learn's own, fold for fold, on tables that ship with it.

scikit-learn as the reference implementation: a search-CV object inside cross_validate.
The reference is built here, independently of the engine: its own loaders, splitters, pipelines
and grids; nothing of ours is imported to make it.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from functools import cache
from typing import Any

import numpy as np
import pytest
from sklearn import datasets
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.model_selection import (
    GridSearchCV,
    KFold,
    RepeatedStratifiedKFold,
    StratifiedKFold,
    cross_validate,
)
from sklearn.neighbors import KNeighborsClassifier
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler

from service.config import Settings

from .runs import outer_scores, run_engine, run_stored

TOLERANCE = 1e-9
C_GRID = [0.01, 0.1, 1.0]
ALPHA_GRID = [0.01, 1.0, 100.0]
# The engine gives estimators that have a random_state and were given none random_state=0;
# the reference sets the same value so both fit the very same estimator.
LOGISTIC = {"max_iter": 5000, "random_state": 0}
# On unscaled features lbfgs needs thousands of iterations (seconds per fit); newton-cholesky
# converges in about ten, so the preprocess "none" case stays fast.
RAW_LOGISTIC = {"max_iter": 5000, "solver": "newton-cholesky"}


def hand_built_auto(model: Any, columns: list[str]) -> Pipeline:
    """Preprocess "auto" on all-numeric tables: median imputation then standardisation."""
    numeric = Pipeline([("impute", SimpleImputer(strategy="median")), ("scale", StandardScaler())])
    return Pipeline(
        [("preprocess", ColumnTransformer([("numeric", numeric, columns)])), ("model", model)]
    )


def wrap(model: Any, preprocess: str, columns: list[str]) -> Pipeline:
    return hand_built_auto(model, columns) if preprocess == "auto" else Pipeline([("model", model)])


@dataclass(frozen=True)
class Case:
    """One request and the scikit-learn reference that must give the same numbers."""

    request: dict[str, Any]
    sample: str
    # (columns) -> (pipeline, param_grid), built with scikit-learn only
    reference: Callable[[list[str]], tuple[Pipeline, Any]]
    outer_cv: Any
    inner_cv: Any


def _request(sample: str, task: str, families: list[dict[str, Any]], **extra: Any) -> dict:
    return {
        "dataset": {"sample": sample},
        "target": "target",
        "task": task,
        "families": families,
        **extra,
    }


def _cancer(preprocess: str) -> Case:
    fixed = RAW_LOGISTIC if preprocess == "none" else {"max_iter": 5000}
    request = _request(
        "breast_cancer",
        "classification",
        [{"estimator": "LogisticRegression", "fixed": fixed, "grid": {"C": C_GRID}}],
        preprocess=preprocess,
        outer={"method": "stratified_kfold", "k": 4, "seed": 2},
        inner={"method": "stratified_kfold", "k": 3, "seed": 1},
        metrics=["accuracy", "roc_auc"],
        pick_by="accuracy",
    )
    return Case(
        request,
        "breast_cancer",
        lambda cols: (
            wrap(LogisticRegression(**fixed, random_state=0), preprocess, cols),
            {"model__C": C_GRID},
        ),
        StratifiedKFold(4, shuffle=True, random_state=2),
        StratifiedKFold(3, shuffle=True, random_state=1),
    )


def _diabetes(preprocess: str) -> Case:
    request = _request(
        "diabetes",
        "regression",
        [{"estimator": "Ridge", "grid": {"alpha": ALPHA_GRID}}],
        preprocess=preprocess,
        outer={"method": "kfold", "k": 5, "seed": 0},
        # no seed: KFold without shuffling, as a search-CV object given cv=KFold(3) splits
        inner={"method": "kfold", "k": 3},
        metrics=["r2", "neg_mean_squared_error"],
        pick_by="neg_mean_squared_error",
    )
    return Case(
        request,
        "diabetes",
        # Ridge has a random_state (used by its sag/saga solvers); the engine sets it to 0
        lambda cols: (wrap(Ridge(random_state=0), preprocess, cols), {"model__alpha": ALPHA_GRID}),
        KFold(5, shuffle=True, random_state=0),
        KFold(3),
    )


def _two_families() -> Case:
    request = _request(
        "breast_cancer",
        "classification",
        [
            {"estimator": "LogisticRegression", "fixed": {"max_iter": 5000}, "grid": {"C": C_GRID}},
            {"estimator": "KNeighborsClassifier", "grid": {"n_neighbors": [3, 9, 15]}},
        ],
        preprocess="auto",
        outer={"method": "stratified_kfold", "k": 3, "seed": 5},
        inner={"method": "stratified_kfold", "k": 3, "seed": 6},
        metrics=["roc_auc", "accuracy"],
    )
    grid = [
        {"model": [LogisticRegression(**LOGISTIC)], "model__C": C_GRID},
        {"model": [KNeighborsClassifier()], "model__n_neighbors": [3, 9, 15]},
    ]
    return Case(
        request,
        "breast_cancer",
        lambda cols: (hand_built_auto(LogisticRegression(**LOGISTIC), cols), grid),
        StratifiedKFold(3, shuffle=True, random_state=5),
        StratifiedKFold(3, shuffle=True, random_state=6),
    )


def _repeated() -> Case:
    request = _request(
        "breast_cancer",
        "classification",
        [{"estimator": "LogisticRegression", "fixed": {"max_iter": 5000}, "grid": {"C": C_GRID}}],
        preprocess="auto",
        outer={"method": "stratified_kfold", "k": 3, "repeats": 2, "seed": 0},
        inner={"method": "stratified_kfold", "k": 3, "seed": 3},
        metrics=["accuracy", "roc_auc"],
    )
    return Case(
        request,
        "breast_cancer",
        lambda cols: (hand_built_auto(LogisticRegression(**LOGISTIC), cols), {"model__C": C_GRID}),
        RepeatedStratifiedKFold(n_splits=3, n_repeats=2, random_state=0),
        StratifiedKFold(3, shuffle=True, random_state=3),
    )


def _wine() -> Case:
    request = _request(
        "wine",
        "classification",
        [{"estimator": "LogisticRegression", "fixed": {"max_iter": 5000}, "grid": {"C": C_GRID}}],
        preprocess="auto",
        outer={"method": "stratified_kfold", "k": 5, "seed": 4},
        inner={"method": "stratified_kfold", "k": 3, "seed": 4},
        metrics=["accuracy", "roc_auc_ovr"],
    )
    return Case(
        request,
        "wine",
        lambda cols: (hand_built_auto(LogisticRegression(**LOGISTIC), cols), {"model__C": C_GRID}),
        StratifiedKFold(5, shuffle=True, random_state=4),
        StratifiedKFold(3, shuffle=True, random_state=4),
    )


CASES = {
    "cancer-none": _cancer("none"),
    "cancer-auto": _cancer("auto"),
    "diabetes-none": _diabetes("none"),
    "diabetes-auto": _diabetes("auto"),
    "cancer-two-families": _two_families(),
    "cancer-repeated-outer": _repeated(),
    "wine-three-classes": _wine(),
}


@dataclass(frozen=True)
class Reference:
    outer: dict[str, np.ndarray]  # metric -> outer fold scores
    outer_best_scores: np.ndarray  # each outer fold's search best_score_
    outer_best_params: list[dict[str, Any]]
    final_best_score: float
    final_best_params: dict[str, Any]


@cache
def reference(name: str) -> Reference:
    """scikit-learn's nested CV for a case, computed once per session."""
    case = CASES[name]
    X, y = getattr(datasets, f"load_{case.sample}")(return_X_y=True, as_frame=True)
    pipeline, grid = case.reference(list(X.columns))
    metrics, pick_by = case.request["metrics"], case.request.get("pick_by")
    search = GridSearchCV(
        pipeline, grid, cv=case.inner_cv, scoring=pick_by or metrics[0], refit=True
    )
    nested = cross_validate(search, X, y, cv=case.outer_cv, scoring=metrics, return_estimator=True)
    final = GridSearchCV(
        pipeline, grid, cv=case.inner_cv, scoring=pick_by or metrics[0], refit=True
    ).fit(X, y)
    return Reference(
        outer={m: np.asarray(nested[f"test_{m}"]) for m in metrics},
        outer_best_scores=np.array([s.best_score_ for s in nested["estimator"]]),
        outer_best_params=[s.best_params_ for s in nested["estimator"]],
        final_best_score=float(final.best_score_),
        final_best_params=final.best_params_,
    )


def as_ours(best_params: dict[str, Any]) -> tuple[str | None, dict[str, Any]]:
    """A search's best_params_ as (estimator class name or None, hyperparameters)."""
    model = best_params.get("model")
    params = {k.removeprefix("model__"): v for k, v in best_params.items() if k != "model"}
    return (type(model).__name__ if model is not None else None), params


def check_pick(pick: dict[str, Any], best_params: dict[str, Any]) -> None:
    estimator, params = as_ours(best_params)
    if estimator is not None:
        assert pick["estimator"] == estimator
    for name, value in params.items():
        assert pick["params"][name] == value, (name, pick["params"], best_params)


def check_against_reference(result: dict[str, Any], name: str) -> None:
    ref = reference(name)
    # scikit-learn as the reference implementation: per outer fold, the score of the refit pick
    for metric, expected in ref.outer.items():
        ours = outer_scores(result, metric)
        assert ours.shape == expected.shape
        np.testing.assert_allclose(ours, expected, rtol=0, atol=TOLERANCE, err_msg=metric)
    # ... the search's best_score_ and best_params_ inside each outer training part
    inner = np.array([row["inner_mean"] for row in result["outer"]])
    np.testing.assert_allclose(inner, ref.outer_best_scores, rtol=0, atol=TOLERANCE)
    for row, best in zip(result["outer"], ref.outer_best_params, strict=True):
        check_pick(row["pick"], best)
    # ... and GridSearchCV(...).fit(X, y): the non-nested search on all rows is the final pick
    final = result["final_pick"]
    assert abs(final["inner_mean"] - ref.final_best_score) < TOLERANCE
    check_pick(final, ref.final_best_params)
    pick_by = result["pick_by"]
    expected_gap = ref.final_best_score - ref.outer[pick_by].mean()
    assert abs(result["optimism_gap"] - expected_gap) < TOLERANCE


@pytest.mark.parametrize("name", list(CASES))
def test_engine_matches_search_cv_inside_cross_validate(name: str) -> None:
    outcome = run_engine(CASES[name].request)
    check_against_reference(outcome.result, name)


@pytest.mark.parametrize("workers", [1, 2])
def test_stored_job_matches_search_cv_inside_cross_validate(
    workers: int, settings: Settings
) -> None:
    outcome = run_stored(CASES["cancer-auto"].request, settings, workers=workers)
    check_against_reference(outcome.result, "cancer-auto")
    assert outcome.result["work"]["units_computed"] == outcome.result["work"]["units_total"]


def test_reference_estimator_refits_like_the_final_model() -> None:
    # scikit-learn as the reference implementation: GridSearchCV(refit=True).best_estimator_
    # is the best candidate refit on all rows; our final model must predict as it does
    name = "cancer-auto"
    case = CASES[name]
    X, y = datasets.load_breast_cancer(return_X_y=True, as_frame=True)
    pipeline, grid = case.reference(list(X.columns))
    search = GridSearchCV(pipeline, grid, cv=case.inner_cv, scoring="accuracy").fit(X, y)
    outcome = run_engine(case.request)
    np.testing.assert_allclose(
        outcome.model.predict_proba(X), search.predict_proba(X), rtol=0, atol=1e-12
    )
