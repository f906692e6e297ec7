"""The `nested` interval at fan-in: per-row losses read off the procedure folds' predictions.

Every procedure fold (service/cv/interval_folds.py) ends in a refit unit that stores its
predictions on the fold's test part. Once the picks are known, the losses of Bates, Hastie &
Tibshirani (2024, Algorithm 1) are those predictions against the table's targets; the arithmetic
is service/cv/nested_interval.py. The same function serves the engine alone (service/cv/nested.py,
predictions kept in memory) and the stored job (service/jobs/execution/result.py, predictions
read back from the store), so both give the same interval.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
import numpy.typing as npt

from service.cv.interval_folds import place_of, repetitions_of
from service.cv.intervals import METRIC_RANGES
from service.cv.nested_interval import NestedInterval, OuterFoldLosses, nested_interval
from service.cv.plan import SelectionPlan
from service.cv.predictions import StoredPredictions
from service.cv.selection import Pick

Floats = npt.NDArray[np.float64]

NESTED_SOURCE = "nested cross-validation (Bates, Hastie & Tibshirani 2024, JASA, Algorithm 1)"


def _zero_one(y: npt.NDArray[np.generic], predicted: npt.NDArray[np.generic]) -> Floats:
    return np.asarray(y != predicted, dtype="float64")


def _squared(y: npt.NDArray[np.generic], predicted: npt.NDArray[np.generic]) -> Floats:
    return np.asarray((np.asarray(y, dtype="float64") - predicted) ** 2, dtype="float64")


def _absolute(y: npt.NDArray[np.generic], predicted: npt.NDArray[np.generic]) -> Floats:
    return np.abs(np.asarray(y, dtype="float64") - np.asarray(predicted, dtype="float64"))


# the metrics served: a per-row loss of predict()'s output, and score = sign · loss + offset
ROW_LOSSES: dict[str, tuple[Callable[..., Floats], float, float]] = {
    "accuracy": (_zero_one, -1.0, 1.0),
    "neg_mean_squared_error": (_squared, -1.0, 0.0),
    "neg_mean_absolute_error": (_absolute, -1.0, 0.0),
}

PredictionBook = Mapping[tuple[str, str], StoredPredictions]  # (fingerprint, key) -> stored


class MissingPredictions(LookupError):
    """A procedure fold's predictions are not in the store (an old, reused score without them)."""


def predicted(stored: StoredPredictions) -> npt.NDArray[Any]:
    """What the model's predict() returned: values, or class labels from the stored indices."""
    values = stored.arrays["predict"]
    if stored.task == "regression":
        return values
    classes = stored.classes or []
    labels = np.asarray(classes, dtype=object if all(isinstance(c, str) for c in classes) else None)
    return labels[values.astype(np.int64)]


def score_entry(metric: str, found: NestedInterval, fits: int | None = None) -> dict[str, Any]:
    """The interval as result v1 carries it, on the metric's scale (higher is better)."""
    _, sign, offset = ROW_LOSSES[metric]
    ends = sorted((sign * found.lower + offset, sign * found.upper + offset))
    low, high = METRIC_RANGES.get(metric, (None, None))
    lower = ends[0] if low is None else max(ends[0], low)
    upper = ends[1] if high is None else min(ends[1], high)
    entry: dict[str, Any] = {
        "method": "nested",
        "level": found.level,
        "lower": lower,
        "upper": upper,
        "cut_to_range": (lower, upper) != (ends[0], ends[1]),
        "point": sign * found.point + offset,  # the bias-corrected estimate
        "se": found.se,
        "repetitions": found.repetitions,
        # on the loss scale, as the paper writes them, so a reader can redo the arithmetic
        "loss": {
            "err_ncv": found.err_ncv,
            "err_cv": found.err_cv,
            "bias": found.bias,
            "mse": found.mse,
            "se_unclipped": found.se_unclipped,
            "se_naive": found.se_naive,
            "lower": found.lower,
            "upper": found.upper,
        },
        "source": NESTED_SOURCE,
    }
    if fits is not None:
        entry["extra_fits"] = fits
    return entry


def metric_interval(
    plan: SelectionPlan, metric: str, picks: Mapping[str, Pick], book: PredictionBook
) -> NestedInterval:
    """The loss-scale interval for `metric` from the procedure folds' predictions."""
    loss_of = ROW_LOSSES[metric][0]
    k = plan.spec.outer.k
    held_out: dict[tuple[int, int], list[Floats]] = {}
    outer: dict[tuple[int, int], Floats] = {}
    for fold in plan.interval_folds:  # in (repetition, outer part, part) order
        place = place_of(fold, k)
        key = (fold.fingerprint, picks[fold.scope].candidate.key)
        if key not in book:
            raise MissingPredictions(f"procedure fold {fold.scope} has no stored predictions")
        losses = loss_of(plan.y[fold.test], predicted(book[key]))
        if place.part == place.outer:
            outer[(place.repetition, place.outer)] = losses
        else:
            held_out.setdefault((place.repetition, place.outer), []).append(losses)
    reps = [
        [
            OuterFoldLosses(float(np.concatenate(held_out[(r, o)]).mean()), outer[(r, o)])
            for o in range(k)
        ]
        for r in range(repetitions_of(plan.spec))
    ]
    pooled = np.concatenate([outer[(r, o)] for r in range(len(reps)) for o in range(k)])
    return nested_interval(reps, pooled, plan.spec.interval.level, n_rows=plan.n_rows)


def nested_entries(
    plan: SelectionPlan, picks: Mapping[str, Pick], book: PredictionBook, fits: int | None = None
) -> dict[str, dict[str, Any] | None]:
    """Each metric's `nested` interval entry, or None for a metric that is not a row mean."""
    entries: dict[str, dict[str, Any] | None] = {}
    for metric in plan.spec.metrics:
        if metric not in ROW_LOSSES:
            entries[metric] = None
            continue
        entries[metric] = score_entry(metric, metric_interval(plan, metric, picks, book), fits)
    return entries
