"""The estimator allow-list and the check of hyperparameters against declared constraints.

Class names from a request are looked up in a fixed table; nothing from a request is ever
imported or evaluated, so a request cannot name arbitrary code.
"""

from __future__ import annotations

import difflib
import importlib
import inspect
import math
from typing import Any

from sklearn.base import BaseEstimator
from sklearn.utils import get_tags
from sklearn.utils._param_validation import InvalidParameterError, validate_parameter_constraints

from service.cv.errors import SpecError

# name -> (module, task). Estimators that fit a single table of rows without extra inputs and
# make sense inside a search; meta-estimators that need another estimator object are left out
# because a JSON request cannot carry one.
_ALLOWED: dict[str, tuple[str, str]] = {
    "LogisticRegression": ("sklearn.linear_model", "classification"),
    "RidgeClassifier": ("sklearn.linear_model", "classification"),
    "SGDClassifier": ("sklearn.linear_model", "classification"),
    "LinearSVC": ("sklearn.svm", "classification"),
    "SVC": ("sklearn.svm", "classification"),
    "KNeighborsClassifier": ("sklearn.neighbors", "classification"),
    "DecisionTreeClassifier": ("sklearn.tree", "classification"),
    "RandomForestClassifier": ("sklearn.ensemble", "classification"),
    "ExtraTreesClassifier": ("sklearn.ensemble", "classification"),
    "GradientBoostingClassifier": ("sklearn.ensemble", "classification"),
    "HistGradientBoostingClassifier": ("sklearn.ensemble", "classification"),
    "AdaBoostClassifier": ("sklearn.ensemble", "classification"),
    "GaussianNB": ("sklearn.naive_bayes", "classification"),
    "LinearDiscriminantAnalysis": ("sklearn.discriminant_analysis", "classification"),
    "MLPClassifier": ("sklearn.neural_network", "classification"),
    "LinearRegression": ("sklearn.linear_model", "regression"),
    "Ridge": ("sklearn.linear_model", "regression"),
    "Lasso": ("sklearn.linear_model", "regression"),
    "ElasticNet": ("sklearn.linear_model", "regression"),
    "BayesianRidge": ("sklearn.linear_model", "regression"),
    "HuberRegressor": ("sklearn.linear_model", "regression"),
    "SGDRegressor": ("sklearn.linear_model", "regression"),
    "SVR": ("sklearn.svm", "regression"),
    "LinearSVR": ("sklearn.svm", "regression"),
    "KNeighborsRegressor": ("sklearn.neighbors", "regression"),
    "DecisionTreeRegressor": ("sklearn.tree", "regression"),
    "RandomForestRegressor": ("sklearn.ensemble", "regression"),
    "ExtraTreesRegressor": ("sklearn.ensemble", "regression"),
    "GradientBoostingRegressor": ("sklearn.ensemble", "regression"),
    "HistGradientBoostingRegressor": ("sklearn.ensemble", "regression"),
    "AdaBoostRegressor": ("sklearn.ensemble", "regression"),
    "MLPRegressor": ("sklearn.neural_network", "regression"),
}


def allowed_estimators(task: str | None = None) -> list[str]:
    """Names on the allow-list, optionally only those for `task`."""
    return sorted(n for n, (_, t) in _ALLOWED.items() if task is None or t == task)


def estimator_class(name: str, *, task: str, field: str) -> type[BaseEstimator]:
    """The allow-listed class called `name`, refusing unknown names and the wrong task."""
    if name not in _ALLOWED:
        hint = difflib.get_close_matches(name.rsplit(".", 1)[-1], list(_ALLOWED), n=1)
        tip = f"did you mean {hint[0]!r}?" if hint else "see the allow-list in DEVELOPERS.md."
        raise SpecError(field, f"{name!r} is not an allowed estimator class name; {tip}")
    module, family_task = _ALLOWED[name]
    if family_task != task:
        raise SpecError(
            field,
            f"{name} is a {family_task} estimator but the job's task is {task}; pick one "
            f"of {', '.join(allowed_estimators(task)[:4])}, ...",
        )
    cls: type[BaseEstimator] = getattr(importlib.import_module(module), name)
    return cls


def parameter_names(cls: type[BaseEstimator]) -> list[str]:
    """The constructor parameters of an estimator class."""
    return [p for p in inspect.signature(cls.__init__).parameters if p != "self"]


def check_params(cls: type[BaseEstimator], params: dict[str, Any], *, field: str) -> None:
    """Refuse unknown names and values outside the class's declared parameter constraints."""
    known = parameter_names(cls)
    for name in params:
        if name not in known:
            hint = difflib.get_close_matches(name, known, n=1)
            tip = f"did you mean {hint[0]!r}?" if hint else f"known: {', '.join(known)}."
            raise SpecError(
                f"{field}.{name}", f"{cls.__name__} has no hyperparameter {name!r}; {tip}"
            )
    constraints = getattr(cls, "_parameter_constraints", {})
    for name, value in params.items():
        if not _finite(value):
            raise SpecError(
                f"{field}.{name}", "infinite and NaN numbers are not allowed; give a finite value."
            )
        try:
            validate_parameter_constraints(
                {name: constraints[name]} if name in constraints else {},
                {name: value},
                caller_name=cls.__name__,
            )
        except InvalidParameterError as exc:
            # scikit-learn says "... must be X. Got Y instead." -- made into one sentence
            text = str(exc).rstrip(".").replace(". Got ", ", got ").removesuffix(" instead")
            raise SpecError(f"{field}.{name}", f"{text}; change the value.") from None


def _finite(value: Any) -> bool:
    """False if a number anywhere in a JSON value is infinite or NaN (JSON cannot carry them)."""
    if isinstance(value, float):
        return math.isfinite(value)
    if isinstance(value, dict):
        return all(_finite(v) for v in value.values())
    if isinstance(value, list | tuple):
        return all(_finite(v) for v in value)
    return True


def accepts_missing_values(cls: type[BaseEstimator], params: dict[str, Any]) -> bool:
    """Whether the estimator fits on rows with NaN (scikit-learn's own input tag)."""
    return bool(get_tags(cls(**params)).input_tags.allow_nan)


def has_random_state(cls: type[BaseEstimator]) -> bool:
    """Whether the estimator takes a `random_state` (so runs can be pinned for reproducibility)."""
    return "random_state" in parameter_names(cls)
