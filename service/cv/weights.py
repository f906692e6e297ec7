"""Observation weights: one non-negative number per row, given to every fit and scorer.

Fits receive them through scikit-learn's metadata routing (each step that accepts
`sample_weight` asks for it), scorers through their `sample_weight` argument; see units.py.
"""

from __future__ import annotations

import inspect
from typing import TYPE_CHECKING, Any

import numpy as np
import numpy.typing as npt
import pandas as pd
from sklearn import config_context
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.pipeline import Pipeline

from service.cv.errors import SpecError
from service.cv.estimators import estimator_class

if TYPE_CHECKING:
    from service.cv.spec import SelectionSpec


def observation_weights(
    name: str, frame: pd.DataFrame, kinds: dict[str, str]
) -> npt.NDArray[np.float64]:
    """The weights column as float64, refusing text, gaps, negatives and an all-zero column."""
    if name not in frame.columns:
        cols = ", ".join(map(str, frame.columns[:8])) + (", ..." if frame.shape[1] > 8 else "")
        raise SpecError("weights", f"column {name!r} is not in the table (columns: {cols}).")
    if kinds.get(name) != "numeric":
        raise SpecError(
            "weights",
            f"weights column {name!r} is {kinds.get(name)}, not numeric; name a "
            "column of non-negative numbers.",
        )
    values = frame[name].to_numpy(dtype="float64", na_value=np.nan)
    missing = int(np.isnan(values).sum())
    if missing:
        raise SpecError(
            "weights",
            f"weights column {name!r} has {missing} missing values; give every row a weight.",
        )
    if not np.isfinite(values).all():
        raise SpecError("weights", f"weights column {name!r} has infinite values; fix them.")
    negative = int((values < 0).sum())
    if negative:
        raise SpecError(
            "weights",
            f"weights column {name!r} has {negative} negative values (e.g. "
            f"{values[values < 0][0]:g}); weights must be zero or more.",
        )
    if not (values > 0).any():
        raise SpecError("weights", f"weights column {name!r} is all zeros; give positive weights.")
    return values


def fit_takes_weights(cls: type[Any]) -> bool:
    """Whether the estimator's fit has a `sample_weight` parameter."""
    return "sample_weight" in inspect.signature(cls.fit).parameters


def check_weight_families(spec: SelectionSpec) -> None:
    """Refuse weights when a family's estimator or a metric cannot take them, naming it."""
    if "roc_auc_ovo" in spec.metrics:
        raise SpecError(
            f"metrics[{spec.metrics.index('roc_auc_ovo')}]",
            "scikit-learn's one-vs-one ROC AUC cannot weigh rows; use roc_auc_ovr with weights.",
        )
    for index, family in enumerate(spec.families):
        cls = estimator_class(family.estimator, task=spec.task, field=f"families[{index}]")
        if not fit_takes_weights(cls):
            raise SpecError(
                f"families[{index}].estimator",
                f"{family.estimator} cannot take observation weights (its fit has no "
                "sample_weight); remove weights or choose another family.",
            )


def _children(estimator: Any) -> list[Any]:
    """The steps, transformers and wrapped estimators directly inside `estimator`."""
    children: list[Any] = []
    if hasattr(estimator, "steps"):
        children += [step for _, step in estimator.steps]
    if hasattr(estimator, "transformers"):
        children += [step for _, step, _ in estimator.transformers]
    for attribute in ("regressor", "estimator"):
        child = getattr(estimator, attribute, None)
        if child is not None and not isinstance(child, str):
            children.append(child)
    return children


def _request_weights(estimator: Any) -> None:
    """Ask every step whose fit takes sample_weight for it, walking pipelines and wrappers."""
    if isinstance(estimator, str) or estimator is None:
        return  # "passthrough" / "drop"
    for child in _children(estimator):
        _request_weights(child)
    if fit_takes_weights(type(estimator)) and hasattr(estimator, "set_fit_request"):
        estimator.set_fit_request(sample_weight=True)


def fit_model(model: Any, X: Any, y: Any, weights: npt.NDArray[np.float64] | None) -> Any:
    """model.fit(X, y), with `weights` routed to every step that accepts sample_weight."""
    if weights is None:
        return model.fit(X, y)
    # metadata routing, switched on for this thread only: the pipeline hands sample_weight to
    # each step that requested it (scalers, the L1 model of a selector, the estimator)
    with config_context(enable_metadata_routing=True):
        _request_weights(model)
        model.fit(X, y, sample_weight=weights)
    _forget_requests(model)
    return model


class _WeightSink(TransformerMixin, BaseEstimator):
    """Stands where the model stands, taking sample_weight as the model does, and hands its
    input on untouched: the steps before it are routed the weights exactly as in the pipeline."""

    def fit(self, X: Any, y: Any = None, sample_weight: Any = None) -> _WeightSink:
        """Nothing to learn."""
        return self

    def transform(self, X: Any) -> Any:
        """X itself."""
        return X


def fit_transform_steps(
    steps: Pipeline, X: Any, y: Any, weights: npt.NDArray[np.float64] | None
) -> Any:
    """Fit the steps before a model on X, y and return X through them, `weights` routed to each
    step as fit_model routes them when the same steps sit inside the whole pipeline."""
    if weights is None:
        return steps.fit_transform(X, y)
    # scikit-learn refuses metadata that nothing consumes; in the whole pipeline the model
    # consumes the weights even when no step before it does, so the sink takes its place
    whole = Pipeline([*steps.steps, ("model", _WeightSink())])
    with config_context(enable_metadata_routing=True):
        _request_weights(whole)
        transformed = whole.fit_transform(X, y, sample_weight=weights)
    _forget_requests(whole)
    return transformed


def _forget_requests(estimator: Any) -> None:
    """Drop the per-instance routing requests once fitted: prediction needs none, and a request
    refers back to its estimator, a cycle that skops cannot write (the handed-over model)."""
    # every estimator reachable through attributes: the fitted clones (transformers_, regressor_,
    # estimator_) carry the requests too, since clone() copies them
    if isinstance(estimator, (list, tuple)):
        for item in estimator:
            _forget_requests(item)
        return
    if not isinstance(estimator, BaseEstimator):
        return
    for value in list(vars(estimator).values()):
        _forget_requests(value)
    vars(estimator).pop("_metadata_request", None)
