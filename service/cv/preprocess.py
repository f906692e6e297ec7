"""Model inputs and the preprocessing that is always fitted inside each fold."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler

from service.cv.candidates import Candidate
from service.cv.errors import SpecError
from service.cv.estimators import accepts_missing_values, estimator_class
from service.cv.recipe import effective_recipe, recipe_pipeline
from service.cv.recipe_spec import Recipe, split_params


@dataclass(frozen=True)
class FeatureTable:
    """The feature columns as the estimators see them, split by kind."""

    X: pd.DataFrame
    numeric: list[str]
    categorical: list[str]


def feature_table(frame: pd.DataFrame, features: list[str], kinds: dict[str, str]) -> FeatureTable:
    """Numeric, boolean and datetime columns as float64; categorical as object with NaN."""
    columns: dict[str, Any] = {}
    numeric: list[str] = []
    categorical: list[str] = []
    for name in features:
        col = frame[name]
        kind = kinds[name]
        if kind == "categorical":
            columns[name] = col.astype(object).where(col.notna(), np.nan)
            categorical.append(name)
            continue
        if kind == "datetime":
            # days since the epoch: a number a model can use, and a time-order caution elsewhere
            values = pd.to_datetime(col, utc=True)
            days = (values - pd.Timestamp(0, tz="UTC")) / pd.Timedelta(days=1)
            columns[name] = days.astype("float64")
        else:
            columns[name] = pd.to_numeric(col.astype(object), errors="coerce").astype("float64")
        numeric.append(name)
    return FeatureTable(pd.DataFrame(columns, index=frame.index), numeric, categorical)


def check_preprocess(
    table: FeatureTable, preprocess: str, estimators: list[tuple[str, dict[str, Any]]], task: str
) -> None:
    """Refuse, before any fit, inputs that the chosen preprocessing cannot hand to a model."""
    if preprocess != "none":
        return
    if table.categorical:
        raise SpecError(
            "preprocess",
            f"preprocess 'none' passes only numeric columns but {table.categorical[:3]} are "
            "categorical; use preprocess 'auto' or leave them out of features.",
        )
    if table.X.isna().any().any():
        for name, params in estimators:
            cls = estimator_class(name, task=task, field="families")
            if not accepts_missing_values(cls, params):
                raise SpecError(
                    "preprocess",
                    f"the features have missing values and {name} cannot fit on them with "
                    "preprocess 'none'; use preprocess 'auto' to impute them inside each fold.",
                )


def build_pipeline(
    candidate: Candidate, table: FeatureTable, task: str, recipe: Recipe | None = None
) -> Any:
    """A fresh, unfitted pipeline: preprocessing (if any) then the candidate's estimator.

    With a recipe, the candidate's recipe values are put into it (recipe.py); the result is a
    Pipeline, or a TransformedTargetRegressor around one when the recipe transforms the target.
    """
    cls = estimator_class(candidate.estimator, task=task, field="families")
    model: BaseEstimator = cls(**split_params(candidate.params)[0])
    if recipe is not None:
        chosen = effective_recipe(recipe, candidate.params)
        return recipe_pipeline(chosen, table.numeric, table.categorical, model, task)
    if candidate.preprocess == "none":
        return Pipeline([("model", model)])
    parts: list[tuple[str, Any, list[str]]] = []
    if table.numeric:
        numeric = Pipeline(
            [("impute", SimpleImputer(strategy="median")), ("scale", StandardScaler())]
        )
        parts.append(("numeric", numeric, table.numeric))
    if table.categorical:
        categorical = Pipeline(
            [
                ("impute", SimpleImputer(strategy="most_frequent")),
                ("encode", OneHotEncoder(handle_unknown="ignore", sparse_output=False)),
            ]
        )
        parts.append(("categorical", categorical, table.categorical))
    return Pipeline([("preprocess", ColumnTransformer(parts)), ("model", model)])
