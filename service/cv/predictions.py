"""Out-of-fold predictions kept compactly, and scoring from them with scikit-learn's scorers.

A fold's test-row predictions (labels, probabilities, decision values or regression values) are
what every metric looks at. Keeping them lets a later request add a metric without a refit: a
stand-in estimator hands the stored arrays to scikit-learn's own scorer, so the metric code is
scikit-learn's, not ours.
"""

from __future__ import annotations

import io
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.ensemble._forest import ForestClassifier
from sklearn.linear_model._base import LinearClassifierMixin
from sklearn.metrics import check_scoring

# the response methods a scorer may ask for, in the order we keep them
RESPONSES = ("predict", "predict_proba", "decision_function")


@dataclass(frozen=True)
class StoredPredictions:
    """One candidate's predictions on one fold's test rows."""

    task: str
    arrays: dict[str, npt.NDArray[Any]]  # response method -> float64 (labels as class indices)
    classes: list[Any] | None = None

    @property
    def kind(self) -> str:
        """The richest response kept: 'proba', 'decision', 'label' or 'value'."""
        if self.task == "regression":
            return "value"
        if "predict_proba" in self.arrays:
            return "proba"
        return "decision" if "decision_function" in self.arrays else "label"

    def encode(self) -> bytes:
        """np.savez_compressed bytes of the arrays."""
        buffer = io.BytesIO()
        np.savez_compressed(buffer, **self.arrays)  # type: ignore[arg-type]
        return buffer.getvalue()

    @classmethod
    def decode(cls, data: bytes, task: str, classes: list[Any] | None) -> StoredPredictions:
        """The inverse of encode."""
        with np.load(io.BytesIO(data), allow_pickle=False) as stored:
            arrays = {name: stored[name] for name in stored.files}
        return cls(task, arrays, classes)


def _labels_from(model: Any, arrays: dict[str, npt.NDArray[Any]]) -> npt.NDArray[Any] | None:
    """Class indices of `model.predict`, read off a response already computed when the class's
    own predict is defined from that response (so it need not be computed twice); else None."""
    # Exactly what those predict methods do (scikit-learn 1.9 source): a forest takes the argmax
    # of predict_proba; a linear classifier takes decision > 0 (two classes) or its argmax
    predict = getattr(type(model), "predict", None)
    forest = predict is ForestClassifier.predict and getattr(model, "n_outputs_", 0) == 1
    if forest and "predict_proba" in arrays:
        return np.argmax(arrays["predict_proba"], axis=1).astype(np.float64)
    if predict is LinearClassifierMixin.predict and "decision_function" in arrays:
        scores = arrays["decision_function"]
        indices = (scores > 0).astype(np.int64) if scores.ndim == 1 else np.argmax(scores, axis=1)
        return indices.astype(np.float64)
    return None


def capture(model: Any, X_test: Any, task: str) -> StoredPredictions:
    """Every response the fitted `model` offers on `X_test`, as float64 arrays, each computed
    once (scored from here by score_stored)."""
    if task == "regression":
        return StoredPredictions(task, {"predict": np.asarray(model.predict(X_test), np.float64)})
    classes = np.asarray(model.classes_)
    arrays: dict[str, npt.NDArray[Any]] = {}
    for method in RESPONSES[1:]:
        if hasattr(model, method):
            try:
                arrays[method] = np.asarray(getattr(model, method)(X_test), dtype=np.float64)
            except (AttributeError, NotImplementedError):
                continue  # e.g. SVC(probability=False) declares predict_proba but refuses it
    derived = _labels_from(model, arrays)
    if derived is None:
        index = {label: i for i, label in enumerate(classes.tolist())}
        labels = np.asarray(model.predict(X_test)).tolist()
        derived = np.asarray([index[label] for label in labels], dtype=np.float64)
    # predict first, as before: the stored archive keeps its member order
    return StoredPredictions(task, {"predict": derived, **arrays}, classes.tolist())


def _classes_array(classes: list[Any]) -> npt.NDArray[Any]:
    # labels come back with the dtype the plan gives the target: strings as objects
    if all(isinstance(c, str) for c in classes):
        return np.asarray(classes, dtype=object)
    return np.asarray(classes)


class _StoredClassifier(ClassifierMixin, BaseEstimator):
    """A stand-in fitted classifier whose responses are the stored arrays (X is ignored)."""

    def __init__(self) -> None:
        pass

    def fit(self, X: Any, y: Any) -> _StoredClassifier:
        """Already fitted: the stored arrays are the fit (check_scoring wants a fit method)."""
        return self


class _StoredRegressor(RegressorMixin, BaseEstimator):
    """A stand-in fitted regressor whose predictions are the stored values (X is ignored)."""

    def __init__(self) -> None:
        pass

    def fit(self, X: Any, y: Any) -> _StoredRegressor:
        """Already fitted: the stored values are the fit (check_scoring wants a fit method)."""
        return self


def stand_in(stored: StoredPredictions) -> BaseEstimator:
    """An estimator offering exactly the stored responses, for scikit-learn's scorers."""
    if stored.task == "regression":
        regressor = _StoredRegressor()
        regressor.predict = _constant("predict", stored.arrays["predict"])
        return regressor
    classifier = _StoredClassifier()
    assert stored.classes is not None
    classes = _classes_array(stored.classes)
    classifier.classes_ = classes
    labels = classes[stored.arrays["predict"].astype(np.int64)]
    classifier.predict = _constant("predict", labels)
    # only the responses that were kept exist, so a scorer needing another one raises
    for method in RESPONSES[1:]:
        if method in stored.arrays:
            setattr(classifier, method, _constant(method, stored.arrays[method]))
    return classifier


def _constant(name: str, values: npt.NDArray[Any]) -> Any:
    def respond(X: Any) -> npt.NDArray[Any]:
        return values

    # scikit-learn reads the response kind from the method's __name__ (_get_response_values)
    respond.__name__ = name
    return respond


def score_stored(
    stored: StoredPredictions,
    y_test: npt.NDArray[Any],
    metrics: list[str],
    sample_weight: npt.NDArray[Any] | None = None,
) -> dict[str, float] | None:
    """`metrics` computed by scikit-learn's scorers from stored predictions (weighted by
    `sample_weight` when given), or None if one of them needs a response that was not kept."""
    shim = stand_in(stored)
    placeholder = np.zeros((len(y_test), 1))
    weighted = {} if sample_weight is None else {"sample_weight": sample_weight}
    try:
        scorer = check_scoring(shim, scoring=list(metrics))
        values = scorer(shim, placeholder, y_test, **weighted)
        return {name: float(value) for name, value in values.items()}
    except AttributeError:
        return None
