"""Intervals on the outer estimate: the request's method checked, and the `quick` interval.

`quick` is the corrected resampled t over the outer fold scores (Nadeau & Bengio 2003, Machine
Learning 52:239-281; Bouckaert & Frank 2004, PAKDD, for repeated k-fold): the J fold scores are
correlated because their training parts overlap, so the plain variance s²/J is too small; their
correction inflates it to (1/J + n_test/n_train)·s² and reads the quantile of a t with J - 1 degrees
of freedom. It needs nothing but what a plain nested job already has: no extra fit.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from service.cv.errors import SpecError
from service.cv.spec import SelectionSpec

QUICK_SOURCE = "corrected resampled t (Nadeau & Bengio 2003; Bouckaert & Frank 2004)"
# How a page or summary names the method in words, after "<level> interval, ".
QUICK_WORDS = "corrected resampled t — no extra fits"
METHOD_WORDS = {
    "quick": QUICK_WORDS,
    "nested": "nested cross-validation (Bates, Hastie & Tibshirani 2024) — extra fits",
    # /v1/compare on two jobs with different outer folds (service/analysis/compare.py)
    "welch": "Welch t over two independent sets of outer folds (weaker: they share rows)",
}
# The coverage study's figure for `quick`, quoted verbatim by the README and the job report so the
# two cannot drift apart (tests/test_readme_coverage.py checks the README holds this exact text).
QUICK_COVERAGE = (
    "measured coverage at level 0.9: 0.925 ± 0.042 to 1.000 (classification) and 0.975 ± 0.025 "
    "(regression), n = 100, 300 and 1,000, tests/benchmarks/bench_coverage.py"
)
NESTED_COVERAGE = (
    "measured coverage at level 0.9: 0.950 ± 0.034 (classification) and 0.950 ± 0.034 to "
    "0.975 ± 0.025 (regression), n = 100, 300 and 1,000, R = 3, tests/benchmarks/bench_coverage.py"
)

# The range a metric's score can take; an interval is cut to it, since the truth lies inside
# (cutting loses no coverage, and an accuracy interval reaching past 1 reads as a mistake).
_UNIT = (0.0, 1.0)
METRIC_RANGES: dict[str, tuple[float | None, float | None]] = {
    **{m: _UNIT for m in ("accuracy", "balanced_accuracy", "roc_auc", "roc_auc_ovr")},
    **{m: _UNIT for m in ("roc_auc_ovo", "average_precision", "f1", "f1_macro", "f1_weighted")},
    **{m: _UNIT for m in ("precision", "precision_macro", "recall", "recall_macro")},
    "matthews_corrcoef": (-1.0, 1.0),
    "neg_brier_score": (-1.0, 0.0),
    "r2": (None, 1.0),
    "explained_variance": (None, 1.0),
    **{m: (None, 0.0) for m in ("neg_log_loss", "neg_mean_squared_error")},
    **{m: (None, 0.0) for m in ("neg_root_mean_squared_error", "neg_mean_absolute_error")},
    **{m: (None, 0.0) for m in ("neg_median_absolute_error", "neg_mean_absolute_percentage_error")},
}


@dataclass(frozen=True)
class CorrectedT:
    """A corrected resampled t interval around the mean of J fold scores."""

    mean: float
    se: float  # sqrt((1/J + n_test/n_train) · s²), s² with ddof=1
    df: int  # J - 1
    t_quantile: float
    lower: float
    upper: float

    def against_zero(self) -> tuple[float, float]:
        """(t, two-sided p) of the hypothesis that the true mean is 0 (a comparison's test).

        Identical values leave no spread to scale by: all zero is no evidence of a difference
        (a job compared with itself, t = 0, p = 1); a constant non-zero shift is the strongest.
        """
        if self.se == 0.0:
            if self.mean == 0.0:
                return 0.0, 1.0
            return math.copysign(math.inf, self.mean), 0.0
        t = self.mean / self.se
        return t, min(1.0, float(2.0 * stats.t.sf(abs(t), self.df)))

    def entry(self, level: float) -> dict[str, Any]:
        """The interval as result v1 and /v1/compare carry it (method `quick`, no extra fit)."""
        return {
            "method": "quick",
            "level": level,
            "lower": self.lower,
            "upper": self.upper,
            "se": self.se,
            "df": self.df,
        }


def corrected_t(values: Sequence[float], test_train_ratio: float, level: float) -> CorrectedT:
    """The two-sided `level` interval of the corrected resampled t over fold scores `values`.

    `test_train_ratio` is n_test / n_train of the folds (0 gives the uncorrected t interval).
    """
    scores = np.asarray(values, dtype="float64")
    folds = len(scores)
    if folds < 2:
        raise ValueError("the corrected resampled t needs at least two fold scores")
    variance = float(scores.var(ddof=1))
    se = math.sqrt((1.0 / folds + test_train_ratio) * variance)
    df = folds - 1
    quantile = float(stats.t.ppf(0.5 + level / 2.0, df))
    mean = float(scores.mean())
    return CorrectedT(mean, se, df, quantile, mean - quantile * se, mean + quantile * se)


def interval_words(interval: dict[str, Any]) -> str:
    """'90% interval, corrected resampled t — no extra fits' for a result's interval entry."""
    level = f"{float(interval['level']) * 100:g}%"
    method = str(interval.get("method"))
    return f"{level} interval, {METHOD_WORDS.get(method, method)}"


def check_interval(spec: SelectionSpec) -> None:
    """Refuse an interval method that cannot serve this request's split; raises SpecError."""
    interval = spec.interval
    if interval.method != "nested":
        return
    for name, plan in (("outer", spec.outer), ("inner", spec.inner)):
        if plan.method in ("group_kfold", "time_series"):
            raise SpecError(
                "interval.method",
                f"'nested' redraws random K-fold partitions, which would break the "
                f"{plan.method} split of {name}; use 'quick' or a kfold or stratified_kfold split.",
            )
    if spec.train_fraction < 1:
        raise SpecError(
            "interval.method",
            "'nested' assesses a selection on all rows, not on a train_fraction share; "
            "use 'quick' for a learning-curve size.",
        )
    if spec.outer.k < 3:
        raise SpecError(
            "interval.method",
            "'nested' needs outer.k of at least 3 (it fits on all parts but two); raise outer.k "
            "or use 'quick'.",
        )
    if spec.outer.repeats > 1:
        raise SpecError(
            "interval.method",
            "'nested' draws its own repetitions of the outer partition; set "
            "interval.repetitions instead of outer.repeats, or use 'quick'.",
        )
    if spec.weights:
        raise SpecError(
            "interval.method",
            "'nested' serves unweighted per-row losses only; remove weights or use 'quick'.",
        )


def _quick(
    metric: str, values: list[float], n_train: list[int], n_test: list[int], level: float
) -> dict[str, Any]:
    ratio = sum(n_test) / sum(n_train)  # the mean test size over the mean training size
    found = corrected_t(values, ratio, level)
    low, high = METRIC_RANGES.get(metric, (None, None))
    lower = found.lower if low is None else max(found.lower, low)
    upper = found.upper if high is None else min(found.upper, high)
    return {
        **found.entry(level),
        "lower": lower,
        "upper": upper,
        "cut_to_range": (lower, upper) != (found.lower, found.upper),
        "t_quantile": found.t_quantile,
        "folds": len(values),
        "extra_fits": 0,  # built from the outer fold scores the job already has
        "test_train_ratio": ratio,
        "source": QUICK_SOURCE,
    }


def attach_intervals(
    spec: SelectionSpec,
    result: dict[str, Any],
    nested: dict[str, dict[str, Any] | None] | None = None,
) -> list[str]:
    """Set `result["estimate"][metric]["interval"]` for every metric; returns the cautions.

    `result` is the engine's assembled result (outer rows and estimate); `nested` the entries
    service/cv/nested_interval_units.py computed for a `nested` request. A metric the method
    cannot serve gets None and one sentence saying why, never a number that is not an interval.
    """
    if spec.interval.method == "nested":
        if nested is None:
            raise ValueError("a nested interval needs its entries computed at fan-in")
        return _attach_nested(result, nested)
    level = spec.interval.level
    outer = result["outer"]
    n_train = [row["n_train"] for row in outer]
    n_test = [row["n_test"] for row in outer]
    cautions: list[str] = []
    flat: list[str] = []
    for metric, estimate in result["estimate"].items():
        estimate["interval"] = None
        values = estimate["values"]
        if spec.outer.method == "time_series":
            continue
        if np.ptp(np.asarray(values, dtype="float64")) == 0:
            flat.append(metric)
            continue
        estimate["interval"] = _quick(metric, values, n_train, n_test, level)
    if spec.outer.method == "time_series":
        cautions.append(
            "No interval on the estimate: the outer folds of a time_series split are ordered "
            "in time, not drawn at random, which the quick interval (corrected resampled t) "
            "assumes; read the per-fold values as a sequence."
        )
    if flat:
        cautions.append(
            f"No interval for {', '.join(flat)}: every outer fold scored the same, so the "
            "corrected resampled t has no spread to work from; that is not evidence that new "
            "data will score the same."
        )
    return cautions


def _attach_nested(result: dict[str, Any], nested: dict[str, dict[str, Any] | None]) -> list[str]:
    unserved = []
    for metric, estimate in result["estimate"].items():
        estimate["interval"] = nested.get(metric)
        if estimate["interval"] is None:
            unserved.append(metric)
    if not unserved:
        return []
    return [
        f"No nested interval for {', '.join(unserved)}: the nested interval needs a score that "
        "is a mean of per-row losses (accuracy, neg_mean_squared_error, "
        "neg_mean_absolute_error); read the quick interval of another job for these."
    ]
