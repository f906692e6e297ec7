"""Statistics for comparing two selections: pure functions over per-fold outer scores.

Two jobs on the same outer folds are compared fold by fold with the corrected resampled t-test of
Nadeau & Bengio (2003, Machine Learning 52:239-281): the folds' training sets overlap, so the
per-fold differences are correlated and the plain paired t-test is far too confident. The
correction inflates the variance by n_test/n_train. Even so there is no unbiased estimator of the
variance of cross-validation (Bengio & Grandvalet 2004, JMLR 5:1089-1105), so the p-value is
approximate. Jobs on different folds can only be compared as two independent samples (Welch),
which ignores that both were computed on the same rows: a weaker comparison, and we say so.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import stats

from service.cv.intervals import QUICK_SOURCE, corrected_t
from service.cv.spec import IntervalSpec

# The level of a comparison's interval: the same default as a job's estimate.
DEFAULT_LEVEL = IntervalSpec().level

CORRECTED_T = "corrected_resampled_t"
WELCH_T = "welch_t"

VARIANCE_CAVEAT = (
    "Cross-validation has no unbiased estimator of its own variance (Bengio & Grandvalet 2004), "
    "so this p-value is approximate."
)
SAME_FOLDS_STATEMENT = (
    "Both jobs were scored on the same outer folds, so they are compared fold by fold with the "
    "corrected resampled t-test (Nadeau & Bengio 2003), which allows for the overlap between "
    "the folds' training sets."
)
DIFFERENT_FOLDS_STATEMENT = (
    "The two jobs were scored on different outer folds, so the comparison is weaker: a Welch "
    "t-test on the two sets of outer values, which treats them as independent samples although "
    "both come from the same rows."
)
NESTED_NOT_FOR_DIFFERENCES = (
    "Both jobs carry a nested interval on {metrics}: each assesses one job's own procedure, "
    "not the difference between two, so the difference above keeps the {test} on the outer "
    "folds; the two nested intervals are shown with each job."
)
SIGN_NOTE = (
    "Differences are the first job minus the second; every metric is higher-is-better "
    "(errors are negated), so a positive difference favours the first job."
)


@dataclass(frozen=True)
class PairedTest:
    """The corrected resampled t-test on J per-fold differences, with its interval."""

    n_folds: int
    mean_difference: float
    variance: float  # ddof=1 over the J differences
    test_train_ratio: float
    t: float
    df: int
    p_value: float  # two-sided
    interval: dict[str, Any]  # the quick interval on the mean difference, as result v1 has it
    test: str = CORRECTED_T


@dataclass(frozen=True)
class UnpairedTest:
    """Welch's t-test on two independent sets of outer values, with its interval."""

    n_left: int
    n_right: int
    mean_difference: float
    t: float
    df: float
    p_value: float  # two-sided
    interval: dict[str, Any] | None  # Welch's, from scipy; None when neither side varies
    test: str = WELCH_T


def corrected_t_test(
    differences: Sequence[float], *, n_train: float, n_test: float, level: float = DEFAULT_LEVEL
) -> PairedTest:
    """Nadeau & Bengio's corrected resampled t-test; t = 0 and p = 1 when every difference is 0.

    The arithmetic (variance, t quantile, bounds) is service.cv.intervals.corrected_t's, the
    one formula the estimate's quick interval uses too.
    """
    if len(differences) < 2:
        raise ValueError("the corrected t-test needs at least two per-fold differences")
    if n_train <= 0 or n_test <= 0:
        raise ValueError("n_train and n_test must be positive")
    ratio = n_test / n_train
    found = corrected_t(differences, ratio, level)
    t, p = found.against_zero()
    variance = float(np.var(np.asarray(differences, dtype="float64"), ddof=1))
    interval = {**found.entry(level), "source": QUICK_SOURCE}
    return PairedTest(len(differences), found.mean, variance, ratio, t, found.df, p, interval)


def welch_t_test(
    left: Sequence[float], right: Sequence[float], level: float = DEFAULT_LEVEL
) -> UnpairedTest:
    """Welch's unequal-variance t-test (two-sided) of mean(left) against mean(right)."""
    if len(left) < 2 or len(right) < 2:
        raise ValueError("Welch's t-test needs at least two values on each side")
    mean_difference = math.fsum(left) / len(left) - math.fsum(right) / len(right)
    if len(set(left)) == 1 and len(set(right)) == 1:
        # scipy answers NaN when neither side varies; the answer is known without it
        t = 0.0 if mean_difference == 0.0 else math.copysign(math.inf, mean_difference)
        p = 1.0 if mean_difference == 0.0 else 0.0
        return UnpairedTest(len(left), len(right), mean_difference, t, math.nan, p, None)
    answer = stats.ttest_ind(left, right, equal_var=False)
    df = float(getattr(answer, "df", math.nan))
    bounds = answer.confidence_interval(level)
    t = float(answer.statistic)
    interval = {
        "method": "welch",
        "level": level,
        "lower": float(bounds.low),
        "upper": float(bounds.high),
        "se": math.sqrt(np.var(left, ddof=1) / len(left) + np.var(right, ddof=1) / len(right)),
        "df": df,
        "source": "Welch's t interval (Welch 1947), scipy.stats.ttest_ind",
    }
    return UnpairedTest(
        len(left), len(right), mean_difference, t, df, float(answer.pvalue), interval
    )


@dataclass(frozen=True)
class OuterScores:
    """One job's outer folds as a comparison needs them (result v1 plus the folds' fingerprints)."""

    job_id: str
    dataset_hash: str
    fingerprints: list[str]  # in (repeat, fold) order
    n_train: list[int]
    n_test: list[int]
    scores: dict[str, list[float]]  # metric -> per-fold values in the same order
    nested: frozenset[str] = frozenset()  # metrics whose estimate has a nested interval


@dataclass(frozen=True)
class MetricComparison:
    """One shared metric: both jobs' per-fold values, their differences and the test."""

    metric: str
    left: list[float]
    right: list[float]
    left_mean: float
    right_mean: float
    differences: list[float] | None  # per fold, only when the folds are the same
    test: PairedTest | UnpairedTest


@dataclass(frozen=True)
class Comparison:
    """Two jobs compared on every metric they share."""

    left_job: str
    right_job: str
    dataset_hash: str
    same_folds: bool
    fingerprints: list[str] | None
    metrics: list[MetricComparison]
    statement: str
    caveats: list[str] = field(default_factory=list)


def _mean(values: Sequence[float]) -> float:
    return math.fsum(values) / len(values)


def compare_outer_scores(left: OuterScores, right: OuterScores) -> Comparison:
    """Compare two jobs' outer scores: paired and corrected on the same folds, Welch otherwise."""
    if left.dataset_hash != right.dataset_hash:
        raise ValueError("the two jobs ran on different datasets")
    same = left.fingerprints == right.fingerprints
    shared = [m for m in left.scores if m in right.scores]
    results: list[MetricComparison] = []
    for metric in shared:
        a, b = left.scores[metric], right.scores[metric]
        differences: list[float] | None = None
        test: PairedTest | UnpairedTest
        if same:
            differences = [x - y for x, y in zip(a, b, strict=True)]
            # The folds' sizes differ by at most a row; the mean sizes give the ratio.
            test = corrected_t_test(
                differences, n_train=_mean(left.n_train), n_test=_mean(left.n_test)
            )
        else:
            test = welch_t_test(a, b)
        results.append(MetricComparison(metric, a, b, _mean(a), _mean(b), differences, test))
    return Comparison(
        left_job=left.job_id,
        right_job=right.job_id,
        dataset_hash=left.dataset_hash,
        same_folds=same,
        fingerprints=list(left.fingerprints) if same else None,
        metrics=results,
        statement=SAME_FOLDS_STATEMENT if same else DIFFERENT_FOLDS_STATEMENT,
        caveats=[VARIANCE_CAVEAT, *_nested_caveat(left, right, results), SIGN_NOTE],
    )


def _nested_caveat(
    left: OuterScores, right: OuterScores, results: list[MetricComparison]
) -> list[str]:
    """Why a difference between two jobs with nested intervals still gets the t interval."""
    both = [r.metric for r in results if r.metric in left.nested and r.metric in right.nested]
    if not both:
        return []
    # one comparison has one test for every metric: paired on the same folds, else Welch
    test = "corrected resampled t" if results[0].test.test == CORRECTED_T else "Welch t"
    return [NESTED_NOT_FOR_DIFFERENCES.format(metrics=", ".join(both), test=test)]


def outer_scores_from_result(
    job_id: str, result: Mapping[str, object], fingerprints: Sequence[str]
) -> OuterScores:
    """OuterScores from result v1 and the outer fold fingerprints in (repeat, fold) order."""
    outer = result["outer"]
    assert isinstance(outer, list)
    if len(outer) != len(fingerprints):
        raise ValueError("the result's outer folds and the stored outer folds disagree")
    metrics = result["metrics"]
    assert isinstance(metrics, list)
    return OuterScores(
        job_id=job_id,
        dataset_hash=str(result["dataset_hash"]),
        fingerprints=list(fingerprints),
        n_train=[int(row["n_train"]) for row in outer],
        n_test=[int(row["n_test"]) for row in outer],
        scores={str(m): [float(row["scores"][m]) for row in outer] for m in metrics},
        nested=frozenset(_nested_metrics(result)),
    )


def _nested_metrics(result: Mapping[str, object]) -> list[str]:
    estimate = result.get("estimate")
    if not isinstance(estimate, Mapping):
        return []
    found = []
    for metric, entry in estimate.items():
        interval = entry.get("interval") if isinstance(entry, Mapping) else None
        if isinstance(interval, Mapping) and interval.get("method") == "nested":
            found.append(str(metric))
    return found
