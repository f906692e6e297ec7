"""Errors across groups: the nested estimate per value of a slice column, from outer predictions.

A slice column splits every outer test fold's rows by value. Each group is scored on its rows of
each outer fold with scikit-learn's scorer (the stored predictions handed over as in
`predictions.py`), and the group's estimate is the mean over outer folds, as the job's estimate
is. The rows of the same fold outside the group ("the rest") are scored alike.

A group is flagged when its estimate of `pick_by` differs from the rest by more than the fold to
fold noise: the per-fold differences (group minus rest) are tested against zero with a two-sided
one-sample t-test (scipy.stats.ttest_1samp) and the group is flagged when p < FLAG_P. Folds share
training rows, so the test is an indication, not a calibrated error rate (the folds are not
independent samples; Nadeau and Bengio 2003 discuss the same issue for comparisons).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt
import pandas as pd
from scipy import stats

from service.cv.describe import describe_values
from service.cv.errors import SpecError
from service.cv.predictions import StoredPredictions, score_stored

MAX_GROUPS = 20  # more values than this are refused: bin a numeric column first
MISSING = "(missing)"
FLAG_P = 0.05  # common practice as a threshold; not a calibrated rate (see the module text)


@dataclass(frozen=True)
class OuterPredictions:
    """One outer fold's test rows (absolute, in the fold's order) and the pick's predictions."""

    repeat: int
    fold: int
    candidate_key: str
    rows: npt.NDArray[np.int64]
    stored: StoredPredictions


def slice_labels(column: pd.Series) -> npt.NDArray[np.object_]:
    """Each row's group as text; missing values form a group of their own."""
    text = column.astype(object).map(str)
    return text.where(column.notna(), MISSING).to_numpy(dtype=object)


def check_slices(slices: Sequence[str], frame: pd.DataFrame) -> None:
    """Refuse slice columns that are absent, repeated or have too many values; raises SpecError."""
    if len(set(slices)) != len(slices):
        raise SpecError("slices", "a column is listed twice in slices; list each once.")
    for i, name in enumerate(slices):
        if name not in frame.columns:
            raise SpecError(f"slices[{i}]", f"column {name!r} is not in the table.")
        distinct = int(frame[name].nunique(dropna=True))
        if distinct > MAX_GROUPS:
            raise SpecError(
                f"slices[{i}]",
                f"column {name!r} has {distinct} distinct values; a slice column may have at "
                f"most {MAX_GROUPS}. Bin it into ranges in the table first and slice by that.",
            )


def subset(stored: StoredPredictions, mask: npt.NDArray[np.bool_]) -> StoredPredictions:
    """The stored predictions of the masked rows only."""
    arrays = {name: values[mask] for name, values in stored.arrays.items()}
    return StoredPredictions(stored.task, arrays, stored.classes)


def _score(stored: StoredPredictions, y: npt.NDArray[Any], metric: str) -> float | None:
    if len(y) == 0:
        return None
    try:
        scores = score_stored(stored, y, [metric])
    except ValueError:  # e.g. roc_auc on rows of one class: the metric is undefined there
        return None
    if scores is None or not math.isfinite(scores[metric]):
        return None  # e.g. log loss or R² undefined on these rows: result v1 holds no NaN
    return scores[metric]


def flag_rule(differences: list[float]) -> tuple[float | None, bool]:
    """The t-test's two-sided p-value for mean(differences) = 0, and whether it is below FLAG_P."""
    if len(differences) < 2:
        return None, False
    values = np.asarray(differences, dtype="float64")
    if float(values.std(ddof=1)) == 0.0:
        # every fold differs by the same amount: no noise to weigh it against
        p_value = 1.0 if float(values.mean()) == 0.0 else 0.0
    else:
        p_value = float(stats.ttest_1samp(values, 0.0).pvalue)
    if not math.isfinite(p_value):
        return None, False
    return p_value, p_value < FLAG_P


def _group(
    outer: list[OuterPredictions],
    labels: npt.NDArray[np.object_],
    y: npt.NDArray[Any],
    value: str,
    metrics: list[str],
    pick_by: str,
) -> dict[str, Any]:
    per_metric: dict[str, list[float]] = {m: [] for m in metrics}
    differences: list[float] = []
    n_predictions = 0
    for part in outer:
        inside = labels[part.rows] == value
        n_predictions += int(inside.sum())
        y_fold = y[part.rows]
        for metric in metrics:
            score = _score(subset(part.stored, inside), y_fold[inside], metric)
            if score is None:
                continue
            per_metric[metric].append(score)
            if metric == pick_by:
                rest = _score(subset(part.stored, ~inside), y_fold[~inside], metric)
                if rest is not None:
                    differences.append(score - rest)

    estimate = {m: describe_values(v) | {"folds": len(v)} for m, v in per_metric.items() if v}
    p_value, flagged = flag_rule(differences)
    return {
        "value": value,
        "n_rows": int((labels == value).sum()),
        "n_predictions": n_predictions,
        "estimate": estimate,
        "difference_from_rest": float(np.mean(differences)) if differences else None,
        "differences": differences,
        "p_value": p_value,
        "flagged": flagged,
    }


def slice_estimates(
    slices: Sequence[str],
    frame: pd.DataFrame,
    y: npt.NDArray[Any],
    outer: list[OuterPredictions],
    metrics: list[str],
    pick_by: str,
) -> list[dict[str, Any]]:
    """Per slice column, per value: counts, the nested estimate per metric, and the flag."""
    out = []
    for column in slices:
        labels = slice_labels(frame[column])
        values = sorted(set(labels.tolist()))
        groups = [_group(outer, labels, y, v, metrics, pick_by) for v in values]
        out.append(
            {
                "column": column,
                "rule": (
                    f"flagged when a two-sided one-sample t-test of the per-outer-fold "
                    f"differences in {pick_by} (group minus the rest of the fold) gives "
                    f"p < {FLAG_P}"
                ),
                "groups": groups,
            }
        )
    return out
