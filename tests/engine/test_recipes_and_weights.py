"""Declared recipes, observation weights and column types in the engine: what they build, what
they refuse before any fit, and the candidate keys that keep their scores apart."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from sklearn.compose import TransformedTargetRegressor
from sklearn.preprocessing import OneHotEncoder, OrdinalEncoder

from service.cv.errors import SpecError
from service.cv.preprocess import build_pipeline

from .runs import plan_for, run_engine, sample_table

DEMO_CSV = Path(__file__).resolve().parents[2] / "demo_data" / "pump_failures.csv"


def demo_frame() -> pd.DataFrame:
    """The invented demo table (categorical and numeric columns), as the service loads it."""
    from service.datasets.sources import DatasetSource, load_table

    return load_table(DatasetSource(path=str(DEMO_CSV)), base_dir=Path.cwd()).frame


def demo_request(**changes: Any) -> dict[str, Any]:
    request: dict[str, Any] = {
        "dataset": {"path": str(DEMO_CSV)},
        "target": "failed_within_30d",
        "task": "classification",
        "features": ["site", "pump_type", "age_years", "vibration_rms_mm_s", "starts_30d"],
        "families": [
            {
                "estimator": "LogisticRegression",
                "fixed": {"max_iter": 1000},
                "grid": {"C": [0.1, 1.0]},
            }
        ],
        "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
        "inner": {"method": "stratified_kfold", "k": 2, "seed": 1},
        "metrics": ["accuracy", "roc_auc"],
    }
    request.update(changes)
    return request


def iris_request(**changes: Any) -> dict[str, Any]:
    request: dict[str, Any] = {
        "dataset": {"sample": "iris"},
        "target": "target",
        "task": "classification",
        "families": [{"estimator": "LogisticRegression", "fixed": {"max_iter": 500}}],
        "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
        "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
        "metrics": ["accuracy"],
    }
    request.update(changes)
    return request


def iris_with(weight: list[float] | np.ndarray) -> pd.DataFrame:
    """Iris (ships with scikit-learn) with a `weight` column."""
    frame, _ = sample_table("iris")
    return frame.assign(weight=weight)


def refusal(request: dict[str, Any], frame: pd.DataFrame | None = None) -> SpecError:
    with pytest.raises(SpecError) as caught:
        plan_for(request, frame)
    return caught.value


# --- candidate keys ---------------------------------------------------------------------------


def _plain_key(estimator: str, params: dict[str, Any], preprocess: str) -> str:
    # the key of a request without recipe, weights or column types: the candidate, its
    # preprocessing and the problem it was scored on (target, task, every column but the target)
    body = {
        "estimator": estimator,
        "params": params,
        "preprocess": preprocess,
        "inputs": {
            "problem": {
                "target": "target",
                "task": "classification",
                "features": {"all_but": ["target"]},
            }
        },
    }
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode()).hexdigest()


@pytest.mark.parametrize("preprocess", ["auto", "none"])
def test_keys_of_plain_requests_are_the_candidate_and_its_problem(preprocess: str) -> None:
    plan = plan_for(iris_request(preprocess=preprocess))
    for candidate in plan.candidates:
        assert candidate.key == _plain_key(candidate.estimator, candidate.params, preprocess)


def test_another_target_or_feature_set_gives_other_keys() -> None:
    # A plain k-fold ignores the labels, so these jobs share fold fingerprints on one table:
    # only the key keeps one job's scores from being reused as the other's.
    base = iris_request(
        target="petal width (cm)",
        task="regression",
        families=[{"estimator": "Ridge", "grid": {"alpha": [0.1, 1.0]}}],
        outer={"method": "kfold", "k": 3},
        inner={"method": "kfold", "k": 2},
        metrics=["r2"],
    )
    other_target = {**base, "target": "petal length (cm)"}
    fewer_features = {**base, "features": ["sepal length (cm)", "sepal width (cm)"]}
    keys = {
        name: {c.key for c in plan_for(request).candidates}
        for name, request in [
            ("base", base),
            ("other target", other_target),
            ("fewer features", fewer_features),
        ]
    }
    assert keys["base"].isdisjoint(keys["other target"])
    assert keys["base"].isdisjoint(keys["fewer features"])


def test_recipe_weights_and_column_types_each_give_other_keys() -> None:
    frame = iris_with(np.ones(150))
    keys = {
        "auto": plan_for(iris_request(), frame).candidates[0].key,
        "default recipe": plan_for(iris_request(preprocess={}), frame).candidates[0].key,
        "no scaling": plan_for(iris_request(preprocess={"numeric": {"scale": False}}), frame)
        .candidates[0]
        .key,
        "weights": plan_for(iris_request(weights="weight"), frame).candidates[0].key,
        "column type": plan_for(
            iris_request(columns={"petal width (cm)": {"kind": "numeric"}}), frame
        )
        .candidates[0]
        .key,
    }
    assert len(set(keys.values())) == len(keys), keys


# --- recipes -------------------------------------------------------------------------------------


def test_default_recipe_gives_the_numbers_of_auto() -> None:
    # the recipe's defaults are "auto"'s steps: the same scores, fold for fold
    frame = demo_frame()
    auto = run_engine(demo_request(), frame).result
    recipe = run_engine(demo_request(preprocess={}), frame).result
    for a, r in zip(auto["outer"], recipe["outer"], strict=True):
        assert a["scores"] == r["scores"]


def test_groups_encodings_and_rare_categories_build_the_declared_steps() -> None:
    frame = demo_frame()
    recipe = {
        "numeric": {"impute": "mean", "scale": False},
        "categorical": {"encode": "ordinal"},
        "groups": [{"columns": ["starts_30d"], "treat_as": "categorical", "min_frequency": 30}],
    }
    plan = plan_for(demo_request(preprocess=recipe), frame)
    pipeline = build_pipeline(plan.candidates[0], plan.table, "classification", plan.spec.recipe)
    pipeline.fit(plan.table.X, plan.y)
    parts = pipeline.named_steps["preprocess"].named_transformers_
    assert isinstance(parts["categorical"].named_steps["encode"], OrdinalEncoder)
    assert "scale" not in parts["numeric"].named_steps
    assert parts["numeric"].named_steps["impute"].strategy == "mean"
    grouped = parts["group0"].named_steps["encode"]
    assert isinstance(grouped, OneHotEncoder)
    # scikit-learn's infrequent categories: counts below 30 are grouped into one column
    assert grouped.infrequent_categories_[0] is not None
    assert len(grouped.infrequent_categories_[0]) > 0


def test_recipe_values_in_a_grid_become_candidates() -> None:
    request = {
        "dataset": {"sample": "diabetes"},
        "target": "target",
        "task": "regression",
        "families": [
            {
                "estimator": "Ridge",
                "grid": {"target__transform": ["none", "log1p"], "numeric__scale": [True]},
            }
        ],
        "preprocess": {},
        "outer": {"method": "kfold", "k": 3, "seed": 0},
        "inner": {"method": "kfold", "k": 3},
        "metrics": ["r2"],
    }
    plan = plan_for(request)
    assert [c.params["target__transform"] for c in plan.candidates] == ["none", "log1p"]
    built = [build_pipeline(c, plan.table, "regression", plan.spec.recipe) for c in plan.candidates]
    assert not isinstance(built[0], TransformedTargetRegressor)
    assert isinstance(built[1], TransformedTargetRegressor)


@pytest.mark.parametrize(
    ("changes", "field", "words"),
    [
        (
            {
                "preprocess": {
                    "groups": [
                        {
                            "columns": ["sepal width (cm)"],
                            "treat_as": "categorical",
                            "impute": "mean",
                        }
                    ]
                }
            },
            "preprocess.groups[0].impute",
            "most_frequent",
        ),
        (
            {"preprocess": {"select": {"method": "k_best", "k": 5}}},
            "preprocess.select.k",
            "4 columns",
        ),
        (
            {"preprocess": {"groups": [{"columns": ["wings"], "treat_as": "numeric"}]}},
            "preprocess.groups[0].columns[0]",
            "'wings'",
        ),
        ({"preprocess": {"select": {"method": "k_best", "k": -3}}}, "preprocess.select.k", "k"),
        (
            {"preprocess": {"select": {"method": "k_best", "score_func": "f_regression"}}},
            "preprocess.select.score_func",
            "f_classif",
        ),
        (
            {"preprocess": {"categorical": {"min_frequency": 1.5}}},
            "preprocess.categorical.min_frequency",
            "min_frequency",
        ),
        (
            {"preprocess": {"select": {"method": "variance", "threshold": -1.0}}},
            "preprocess.select.threshold",
            "threshold",
        ),
        ({"preprocess": {"select": {"method": "l1_model", "C": 0.0}}}, "preprocess.select", "C"),
        ({"preprocess": {"target": "log1p"}}, "preprocess.target", "regression"),
        (
            {"families": [{"estimator": "LogisticRegression", "grid": {"select__k": [2]}}]},
            "families[0].grid.select__k",
            "recipe",
        ),
        (
            {
                "preprocess": {},
                "families": [{"estimator": "LogisticRegression", "grid": {"select__k": [2]}}],
            },
            "families[0]",
            "no select step",
        ),
        (
            {
                "preprocess": {"select": {"method": "k_best"}},
                "families": [{"estimator": "LogisticRegression", "grid": {"select__k": [2, -1]}}],
            },
            "families[0].select.k",
            "k",
        ),
        (
            {
                "preprocess": {},
                "families": [{"estimator": "LogisticRegression", "grid": {"scale__on": [True]}}],
            },
            "families[0]",
            "recipe section",
        ),
    ],
    ids=[
        "mean-of-categories",
        "k-above-the-columns",
        "missing-group-column",
        "negative-k",
        "score-func-of-other-task",
        "min-frequency",
        "negative-threshold",
        "zero-C",
        "target-transform-on-classification",
        "recipe-value-without-recipe",
        "select-value-without-select",
        "bad-k-in-grid",
        "unknown-section",
    ],
)
def test_recipe_refusals(changes: dict[str, Any], field: str, words: str) -> None:
    error = refusal(iris_request(**changes))
    assert error.field == field, error.message
    assert words in error.message
    assert error.message.endswith(".")


def test_no_imputation_with_missing_values_needs_an_estimator_that_takes_them() -> None:
    frame = demo_frame()  # bearing_temp_c has missing values
    error = refusal(
        demo_request(
            features=["bearing_temp_c", "age_years"], preprocess={"numeric": {"impute": "none"}}
        ),
        frame,
    )
    assert error.field == "preprocess" and "'bearing_temp_c'" in error.message
    families = [{"estimator": "HistGradientBoostingClassifier", "fixed": {"max_iter": 20}}]
    plan = plan_for(
        demo_request(
            features=["bearing_temp_c", "age_years"],
            families=families,
            preprocess={"numeric": {"impute": "none"}},
        ),
        frame,
    )
    assert len(plan.candidates) == 1


def test_log1p_refuses_targets_at_or_below_minus_one() -> None:
    frame, _ = sample_table("diabetes")
    frame = frame.assign(target=frame["target"] - 100.0)
    request = {
        "dataset": {"sample": "diabetes"},
        "target": "target",
        "task": "regression",
        "families": [{"estimator": "Ridge"}],
        "preprocess": {"target": "log1p"},
        "outer": {"method": "kfold", "k": 3},
        "inner": {"method": "kfold", "k": 3},
        "metrics": ["r2"],
    }
    error = refusal(request, frame)
    assert error.field == "preprocess.target" and "power" in error.message


# --- weights -------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("weights", "words"),
    [
        ([-1.0] + [1.0] * 149, "1 negative"),
        ([np.nan] * 3 + [1.0] * 147, "3 missing"),
        ([0.0] * 150, "all zeros"),
        (["heavy"] * 150, "not numeric"),
    ],
    ids=["negative", "missing", "all-zero", "text"],
)
def test_bad_weights_are_refused(weights: list[Any], words: str) -> None:
    error = refusal(iris_request(weights="weight"), iris_with(weights))
    assert error.field == "weights"
    assert words in error.message and "'weight'" in error.message


def test_weights_for_a_family_that_cannot_take_them_name_the_family() -> None:
    families = [
        {"estimator": "LogisticRegression"},
        {"estimator": "KNeighborsClassifier", "grid": {"n_neighbors": [3, 5]}},
    ]
    error = refusal(iris_request(weights="weight", families=families), iris_with(np.ones(150)))
    assert error.field == "families[1].estimator"
    assert "KNeighborsClassifier" in error.message


def test_weights_with_one_vs_one_roc_auc_are_refused() -> None:
    request = iris_request(weights="weight", metrics=["accuracy", "roc_auc_ovo"])
    error = refusal(request, iris_with(np.ones(150)))
    assert error.field == "metrics[1]" and "roc_auc_ovr" in error.message


def test_weights_column_is_not_a_feature() -> None:
    plan = plan_for(iris_request(weights="weight"), iris_with(np.arange(150) % 4 + 1.0))
    assert "weight" not in plan.table.X.columns
    assert plan.weights is not None and plan.weights.sum() == (np.arange(150) % 4 + 1.0).sum()
    error = refusal(
        iris_request(weights="weight", features=["sepal length (cm)", "weight"]),
        iris_with(np.ones(150)),
    )
    assert error.field == "features[1]"


# --- column types --------------------------------------------------------------------------------


def test_a_numeric_column_declared_categorical_is_one_hot_encoded() -> None:
    frame = demo_frame()
    plan = plan_for(demo_request(columns={"starts_30d": {"kind": "categorical"}}), frame)
    assert "starts_30d" in plan.table.categorical
    assert "starts_30d" not in plan.table.numeric


@pytest.mark.parametrize(
    ("columns", "field"),
    [
        ({"age_years": {"kind": "datetime", "format": "%Q-%m"}}, "columns.age_years.format"),
        ({"site": {"kind": "datetime", "format": "%Y"}}, "columns.site.format"),
        ({"site": {"kind": "datetime", "format": "plain"}}, "columns.site.format"),
        ({"site": {"kind": "numeric"}}, "columns.site.kind"),
        ({"site": {"kind": "boolean"}}, "columns.site.kind"),
        ({"nowhere": {"kind": "numeric"}}, "columns.nowhere"),
    ],
    ids=[
        "unknown-directive",
        "format-mismatch",
        "no-directive",
        "text-as-numbers",
        "text-as-boolean",
        "missing-column",
    ],
)
def test_column_type_refusals(columns: dict[str, Any], field: str) -> None:
    error = refusal(demo_request(columns=columns), demo_frame())
    assert error.field == field, error.message
    assert error.message.endswith(".")


@pytest.mark.parametrize(
    "preprocess",
    ["auto", {"target": "log1p"}, {"select": {"method": "l1_model", "alpha": 0.001}}],
    ids=["auto", "log target", "l1 selection"],
)
def test_a_model_fitted_with_weights_is_written_in_skops_format(preprocess: Any) -> None:
    # Routing requests refer back to their estimator; the handed-over file must not carry them.
    import skops.io as sio

    from service.cv.weights import fit_model
    from service.jobs.handover.model_file import model_bytes

    frame = iris_with(1.0 + (np.arange(150) % 4))
    request = iris_request(
        target="petal width (cm)",
        task="regression",
        families=[{"estimator": "Ridge"}],
        outer={"method": "kfold", "k": 3},
        inner={"method": "kfold", "k": 3},
        metrics=["r2"],
        features=["sepal length (cm)", "sepal width (cm)", "petal length (cm)"],
        weights="weight",
        preprocess=preprocess,
    )
    plan = plan_for(request, frame)
    model = build_pipeline(plan.candidates[0], plan.table, "regression", plan.spec.recipe)
    fit_model(model, plan.table.X, plan.y, plan.weights)
    loaded = sio.loads(model_bytes(model), trusted=sio.get_untrusted_types(data=model_bytes(model)))
    assert np.array_equal(loaded.predict(plan.table.X), model.predict(plan.table.X))
