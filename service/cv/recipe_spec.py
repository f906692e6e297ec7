"""Request models for column types and the declared preprocessing recipe (job request v1).

Kept apart from spec.py so the recipe's vocabulary lives in one place; spec.py only refers to
these models. Values here are checked for shape by pydantic; their scikit-learn meaning (e.g. an
imputation strategy, a `k`) is checked against the classes' own `_parameter_constraints` in
recipe.py before anything runs.
"""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

ColumnKindName = Literal["numeric", "categorical", "boolean", "datetime"]
Imputation = Literal["mean", "median", "most_frequent", "constant", "none"]
Encoding = Literal["onehot", "ordinal"]
TargetTransform = Literal["none", "log1p", "power"]
ScoreFunction = Literal[
    "f_classif",
    "chi2",
    "mutual_info_classif",
    "f_regression",
    "mutual_info_regression",
    "r_regression",
]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class ColumnType(_Strict):
    """How to read one column: its kind, and for dates written as text the strptime format."""

    kind: ColumnKindName
    format: str | None = Field(default=None, min_length=1, max_length=100)

    @model_validator(mode="after")
    def _format_for_dates(self) -> ColumnType:
        if self.format is not None and self.kind != "datetime":
            raise ValueError(
                f"format: only a datetime column takes a format, not a {self.kind} one; "
                "remove it or set kind 'datetime'"
            )
        return self


class NumericSteps(_Strict):
    """Steps for numeric columns: imputation, then standardisation when `scale` is on."""

    impute: Imputation = "median"
    fill_value: float | None = None
    scale: bool = True


class CategoricalSteps(_Strict):
    """Steps for categorical columns: imputation, then one-hot or ordinal encoding.

    `min_frequency` groups rare categories into one (scikit-learn's infrequent categories): an
    integer count or a share of the training rows.
    """

    impute: Imputation = "most_frequent"
    fill_value: str | None = None
    encode: Encoding = "onehot"
    min_frequency: int | float | None = None


class ColumnGroup(_Strict):
    """Named columns treated as one group (e.g. a year used as a category), with their steps."""

    columns: list[str] = Field(min_length=1)
    treat_as: Literal["numeric", "categorical"]
    impute: Imputation | None = None  # None: the treat_as group's default
    fill_value: float | str | None = None
    scale: bool = True  # numeric only
    encode: Encoding = "onehot"  # categorical only
    min_frequency: int | float | None = None  # categorical only


class FeatureSelection(_Strict):
    """Feature selection fitted inside every fold, from an allow-list of selectors.

    - `k_best`: SelectKBest with `score_func` and `k`;
    - `variance`: VarianceThreshold with `threshold`;
    - `l1_model`: SelectFromModel on an L1 model (LogisticRegression with penalty l1 and `C`
      for classification, Lasso with `alpha` for regression), at most `max_features`.
    """

    method: Literal["k_best", "variance", "l1_model"]
    score_func: ScoreFunction | None = None
    k: int | Literal["all"] | None = None
    threshold: float | None = None
    C: float | None = None
    alpha: float | None = None
    max_features: int | None = None

    @model_validator(mode="after")
    def _fields_of_method(self) -> FeatureSelection:
        allowed = {
            "k_best": {"score_func", "k"},
            "variance": {"threshold"},
            "l1_model": {"C", "alpha", "max_features"},
        }[self.method]
        given = {
            name
            for name in ("score_func", "k", "threshold", "C", "alpha", "max_features")
            if getattr(self, name) is not None
        }
        extra = sorted(given - allowed)
        if extra:
            raise ValueError(
                f"{extra[0]}: is not an option of method {self.method!r} (its options: "
                f"{', '.join(sorted(allowed))}); remove it"
            )
        return self


class Recipe(_Strict):
    """A declared preprocessing recipe, fitted inside every fold like "auto"."""

    numeric: NumericSteps = NumericSteps()
    categorical: CategoricalSteps = CategoricalSteps()
    groups: list[ColumnGroup] = Field(default_factory=list)
    select: FeatureSelection | None = None
    target: TargetTransform = "none"

    @model_validator(mode="after")
    def _each_column_once(self) -> Recipe:
        seen: set[str] = set()
        for group in self.groups:
            for name in group.columns:
                if name in seen:
                    raise ValueError(
                        f"groups: column {name!r} is in more than one group; keep it in one"
                    )
                seen.add(name)
        return self


# Recipe values may sit in a family's fixed, grid or ranges like hyperparameters, named
# "<section>__<field>" (e.g. "select__k", "numeric__scale", "categorical__encode",
# "target__transform"); estimator hyperparameters never contain "__".
RECIPE_SEPARATOR = "__"
RECIPE_SECTIONS = ("numeric", "categorical", "select", "target")


def split_params(params: dict[str, object]) -> tuple[dict[str, object], dict[str, object]]:
    """(estimator hyperparameters, recipe values) of a family's or candidate's params."""
    model = {k: v for k, v in params.items() if RECIPE_SEPARATOR not in k}
    recipe = {k: v for k, v in params.items() if RECIPE_SEPARATOR in k}
    return model, recipe


def with_overrides(recipe: Recipe, overrides: dict[str, object]) -> Recipe:
    """The recipe with "<section>__<field>" values put in; ValueError naming a bad key."""
    body = recipe.model_dump()
    for key, value in overrides.items():
        section, _, name = key.partition(RECIPE_SEPARATOR)
        if section not in RECIPE_SECTIONS:
            raise ValueError(
                f"{key!r} names no recipe section; recipe values are named "
                f"{', '.join(s + '__<field>' for s in RECIPE_SECTIONS)}"
            )
        if section == "target":
            if name != "transform":
                raise ValueError(f"{key!r}: the target section has one field, target__transform")
            body["target"] = value
            continue
        if section == "select" and body["select"] is None:
            raise ValueError(
                f"{key!r} tunes feature selection but the recipe has no select step; add "
                '"select": {"method": ...} to preprocess'
            )
        body[section] = {**body[section], name: value}
    return Recipe.model_validate(body)
