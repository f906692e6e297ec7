"""A declared preprocessing recipe as a scikit-learn pipeline, and its checks before any fit.

Every step is a scikit-learn class fitted inside each fold, exactly as "auto" is. Values are
checked against each class's own `_parameter_constraints`, as estimator hyperparameters are.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from pydantic import ValidationError
from sklearn.base import BaseEstimator
from sklearn.compose import ColumnTransformer, TransformedTargetRegressor
from sklearn.feature_selection import (
    SelectFromModel,
    SelectKBest,
    VarianceThreshold,
    chi2,
    f_classif,
    f_regression,
    mutual_info_classif,
    mutual_info_regression,
    r_regression,
)
from sklearn.impute import SimpleImputer
from sklearn.linear_model import Lasso, LogisticRegression
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, OrdinalEncoder, PowerTransformer, StandardScaler
from sklearn.utils._param_validation import InvalidParameterError, validate_parameter_constraints

from service.cv.errors import SpecError
from service.cv.estimators import accepts_missing_values, estimator_class
from service.cv.recipe_spec import (
    ColumnGroup,
    FeatureSelection,
    Recipe,
    split_params,
    with_overrides,
)

SCORE_FUNCTIONS = {
    "f_classif": (f_classif, "classification"),
    "chi2": (chi2, "classification"),
    "mutual_info_classif": (mutual_info_classif, "classification"),
    "f_regression": (f_regression, "regression"),
    "mutual_info_regression": (mutual_info_regression, "regression"),
    "r_regression": (r_regression, "regression"),
}
# the L1 model that selection from a model fits: liblinear is the solver that takes an L1
# penalty on every problem size; random_state pinned like the families' (candidates.py)
L1_RANDOM_STATE = 0


def _numeric_steps(impute: str, fill_value: Any, scale: bool) -> list[tuple[str, Any]]:
    steps: list[tuple[str, Any]] = []
    if impute != "none":
        steps.append(("impute", SimpleImputer(strategy=impute, fill_value=fill_value)))
    if scale:
        steps.append(("scale", StandardScaler()))
    return steps


def _categorical_steps(
    impute: str, fill_value: Any, encode: str, min_frequency: Any
) -> list[tuple[str, Any]]:
    steps: list[tuple[str, Any]] = []
    if impute != "none":
        steps.append(("impute", SimpleImputer(strategy=impute, fill_value=fill_value)))
    if encode == "onehot":
        # grouped rare categories also take unseen ones at predict time
        unknown = "infrequent_if_exist" if min_frequency is not None else "ignore"
        encoder: Any = OneHotEncoder(
            handle_unknown=unknown, sparse_output=False, min_frequency=min_frequency
        )
    else:
        encoder = OrdinalEncoder(
            handle_unknown="use_encoded_value", unknown_value=-1, min_frequency=min_frequency
        )
    steps.append(("encode", encoder))
    return steps


def _as_step(steps: list[tuple[str, Any]]) -> Any:
    return Pipeline(steps) if steps else "passthrough"


def _group_steps(group: ColumnGroup) -> list[tuple[str, Any]]:
    if group.treat_as == "numeric":
        return _numeric_steps(group.impute or "median", group.fill_value, group.scale)
    return _categorical_steps(
        group.impute or "most_frequent", group.fill_value, group.encode, group.min_frequency
    )


def selector(select: FeatureSelection, task: str) -> BaseEstimator:
    """The scikit-learn selector a select step names."""
    if select.method == "k_best":
        default = "f_classif" if task == "classification" else "f_regression"
        func = SCORE_FUNCTIONS[select.score_func or default][0]
        return SelectKBest(func, k=10 if select.k is None else select.k)
    if select.method == "variance":
        return VarianceThreshold(0.0 if select.threshold is None else select.threshold)
    model: BaseEstimator
    if task == "classification":
        model = LogisticRegression(
            l1_ratio=1.0,
            solver="liblinear",
            C=1.0 if select.C is None else select.C,
            random_state=L1_RANDOM_STATE,
        )
    else:
        model = Lasso(alpha=1.0 if select.alpha is None else select.alpha)
    return SelectFromModel(model, max_features=select.max_features)


def recipe_pipeline(
    recipe: Recipe, numeric: list[str], categorical: list[str], model: Any, task: str
) -> Any:
    """preprocess (per column group) -> select (if any) -> model, wrapped for the target."""
    named = {name for group in recipe.groups for name in group.columns}
    parts: list[tuple[str, Any, list[str]]] = []
    rest_numeric = [c for c in numeric if c not in named]
    rest_categorical = [c for c in categorical if c not in named]
    n, c = recipe.numeric, recipe.categorical
    if rest_numeric:
        parts.append(
            ("numeric", _as_step(_numeric_steps(n.impute, n.fill_value, n.scale)), rest_numeric)
        )
    if rest_categorical:
        cat_steps = _categorical_steps(c.impute, c.fill_value, c.encode, c.min_frequency)
        parts.append(("categorical", _as_step(cat_steps), rest_categorical))
    for index, group in enumerate(recipe.groups):
        parts.append((f"group{index}", _as_step(_group_steps(group)), list(group.columns)))
    steps: list[tuple[str, Any]] = [("preprocess", ColumnTransformer(parts))]
    if recipe.select is not None:
        steps.append(("select", selector(recipe.select, task)))
    steps.append(("model", model))
    pipeline = Pipeline(steps)
    if recipe.target == "log1p":
        # log1p/expm1: defined at zero, so zero-inflated targets need no offset
        return TransformedTargetRegressor(
            regressor=pipeline, func=np.log1p, inverse_func=np.expm1, check_inverse=False
        )
    if recipe.target == "power":
        return TransformedTargetRegressor(regressor=pipeline, transformer=PowerTransformer())
    return pipeline


def _constraint_check(obj: BaseEstimator, names: list[str], field: str) -> None:
    constraints = type(obj)._parameter_constraints
    params = obj.get_params(deep=False)
    for name in names:
        try:
            validate_parameter_constraints(
                {name: constraints[name]}, {name: params[name]}, caller_name=type(obj).__name__
            )
        except InvalidParameterError as exc:
            text = str(exc).rstrip(".").replace(". Got ", ", got ").removesuffix(" instead")
            raise SpecError(field, f"{text}; change the value.") from None


def _check_values(recipe: Recipe, task: str, field: str) -> None:
    """scikit-learn's declared constraints for every value the recipe sets."""
    n, c = recipe.numeric, recipe.categorical
    if n.impute != "none":
        imputer = SimpleImputer(strategy=n.impute, fill_value=n.fill_value)
        _constraint_check(imputer, ["strategy", "fill_value"], f"{field}.numeric")
    categorical = [(f"{field}.categorical", c.impute)] + [
        (f"{field}.groups[{i}]", g.impute)
        for i, g in enumerate(recipe.groups)
        if g.treat_as == "categorical"
    ]
    for where, impute in categorical:
        if impute in ("mean", "median"):
            raise SpecError(
                f"{where}.impute",
                f"categories have no {impute}; use most_frequent, constant or none.",
            )
    if c.impute != "none":
        imputer = SimpleImputer(strategy=c.impute, fill_value=c.fill_value)
        _constraint_check(imputer, ["strategy", "fill_value"], f"{field}.categorical")
    for i, group in enumerate([None, *recipe.groups]):
        where = f"{field}.categorical" if group is None else f"{field}.groups[{i - 1}]"
        min_frequency = c.min_frequency if group is None else group.min_frequency
        if min_frequency is not None:
            _constraint_check(
                OneHotEncoder(min_frequency=min_frequency),
                ["min_frequency"],
                f"{where}.min_frequency",
            )
    if recipe.target != "none" and task != "regression":
        raise SpecError(
            f"{field}.target",
            "a target transform is for regression; remove it for a classification task.",
        )
    select = recipe.select
    if select is None:
        return
    where = f"{field}.select"
    if select.score_func is not None and SCORE_FUNCTIONS[select.score_func][1] != task:
        names = [n for n, (_, t) in SCORE_FUNCTIONS.items() if t == task]
        raise SpecError(
            f"{where}.score_func",
            f"{select.score_func} scores features for {SCORE_FUNCTIONS[select.score_func][1]}, "
            f"not {task}; use one of {', '.join(names)}.",
        )
    built = selector(select, task)
    if select.method == "k_best":
        _constraint_check(built, ["k"], f"{where}.k")
    elif select.method == "variance":
        _constraint_check(built, ["threshold"], f"{where}.threshold")
    else:
        _constraint_check(built, ["max_features"], f"{where}.max_features")
        inner = built.estimator
        _constraint_check(inner, ["C"] if task == "classification" else ["alpha"], where)


def _width_bound(recipe: Recipe, table: Any) -> int:
    """The most columns the preprocess step can hand on: one-hot adds one per category seen."""
    named = {n: g for g in recipe.groups for n in g.columns}
    width = 0
    for name in [*table.numeric, *table.categorical]:
        group = named.get(name)
        if group is not None:
            categorical, encode = group.treat_as == "categorical", group.encode
        else:
            categorical, encode = name in table.categorical, recipe.categorical.encode
        if categorical and encode == "onehot":
            width += max(1, int(table.X[name].nunique(dropna=False)))
        else:
            width += 1
    return width


def _check_k(recipe: Recipe, table: Any, field: str) -> None:
    select = recipe.select
    if select is None or select.method != "k_best" or select.k == "all":
        return
    k = 10 if select.k is None else select.k  # SelectKBest's default
    bound = _width_bound(recipe, table)
    if k > bound:
        raise SpecError(
            f"{field}.select.k",
            f"k={k} is more than the {bound} columns the preprocessing can give; lower k "
            'or use "all".',
        )


def _check_missing(recipe: Recipe, table: Any, candidates: list[Any], task: str) -> None:
    """Without imputation, missing values reach the model: only estimators that take NaN."""
    named = {n: g for g in recipe.groups for n in g.columns}
    for name in [*table.numeric, *table.categorical]:
        group = named.get(name)
        default = recipe.numeric if name in table.numeric else recipe.categorical
        impute = group.impute if group is not None and group.impute else default.impute
        if impute != "none" or not table.X[name].isna().any():
            continue
        for candidate in candidates:
            cls = estimator_class(candidate.estimator, task=task, field="families")
            if not accepts_missing_values(cls, split_params(candidate.params)[0]):
                raise SpecError(
                    "preprocess",
                    f"column {name!r} has missing values, its recipe imputes none and "
                    f"{candidate.estimator} cannot fit on them; set an impute strategy.",
                )


def effective_recipe(base: Recipe, params: dict[str, Any]) -> Recipe:
    """The spec's recipe with a candidate's recipe values put in."""
    return with_overrides(base, split_params(params)[1])


def check_recipe(spec: Any, table: Any, candidates: list[Any], y: np.ndarray) -> None:
    """Refuse, before any fit, a recipe that names missing columns or holds invalid values."""
    base: Recipe = spec.recipe
    features = set(table.numeric) | set(table.categorical)
    for g, group in enumerate(base.groups):
        for i, name in enumerate(group.columns):
            if name not in features:
                shown = ", ".join(sorted(features)[:8]) + (", ..." if len(features) > 8 else "")
                raise SpecError(
                    f"preprocess.groups[{g}].columns[{i}]",
                    f"column {name!r} is not among the features ({shown}); name a feature column.",
                )
    _check_values(base, spec.task, "preprocess")
    seen: set[str] = set()
    for candidate in candidates:
        family = f"families[{candidate.family}]"
        overrides = split_params(candidate.params)[1]
        text = repr((candidate.estimator, sorted(overrides.items())))
        if text in seen:
            continue
        seen.add(text)
        try:
            recipe = with_overrides(base, overrides)
        except ValidationError as exc:
            first = exc.errors()[0]
            raise SpecError(
                f"{family}.{'.'.join(map(str, first['loc']))}",
                f"{first['msg'][0].lower()}{first['msg'][1:].removeprefix('Value error, ')} "
                f"(got {first.get('input')!r}).",
            ) from None
        except ValueError as exc:
            raise SpecError(family, f"{exc}.") from None
        _check_values(recipe, spec.task, family)
        _check_k(recipe, table, family if overrides else "preprocess")
        _check_missing(recipe, table, [candidate], spec.task)
        if recipe.target == "log1p" and float(np.min(y)) <= -1:
            raise SpecError(
                f"{family if overrides else 'preprocess'}.target",
                f"log1p needs target values above -1 but the smallest is {float(np.min(y)):g}; "
                "use target 'power'.",
            )
