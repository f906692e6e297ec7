"""The refresh comparison's tests against published worked values and scipy."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import load_diabetes, make_moons
from sklearn.linear_model import Ridge
from sklearn.model_selection import KFold, RepeatedStratifiedKFold, cross_val_score
from sklearn.svm import SVC

from service.schedules.compare import compare_results, corrected_t, refresh_status, welch_t


def test_corrected_t_reproduces_the_published_worked_example() -> None:
    # scikit-learn's example "Statistical comparison of models using grid search" (which follows
    # Nadeau & Bengio 2003): make_moons(100, noise=0.352, random_state=1), SVC rbf vs linear,
    # RepeatedStratifiedKFold(10, 10, random_state=0), roc_auc; corrected t = 0.750, one-sided
    # p = 0.227 (docs/references.md, rerun on scikit-learn 1.9.1)
    x, y = make_moons(n_samples=100, noise=0.352, random_state=1)
    cv = RepeatedStratifiedKFold(n_splits=10, n_repeats=10, random_state=0)
    rbf = cross_val_score(SVC(kernel="rbf", random_state=0), x, y, cv=cv, scoring="roc_auc")
    linear = cross_val_score(SVC(kernel="linear", random_state=0), x, y, cv=cv, scoring="roc_auc")
    t, df, p = corrected_t(list(rbf - linear), n_train=90, n_test=10)
    assert t == pytest.approx(0.750, abs=5e-4)
    assert df == 99
    assert p / 2 == pytest.approx(0.227, abs=5e-4)  # ours is two-sided


def test_welch_t_equals_scipy() -> None:
    # scipy.stats.ttest_ind(equal_var=False) is Welch's test (Welch 1947) as the reference
    rng = np.random.default_rng(3)
    new, old = rng.normal(0.8, 0.02, 5), rng.normal(0.78, 0.05, 4)
    t, df, p = welch_t(list(new), list(old))
    reference = stats.ttest_ind(new, old, equal_var=False)
    assert t == pytest.approx(reference.statistic, rel=1e-12)
    assert p == pytest.approx(reference.pvalue, rel=1e-10)
    assert df == pytest.approx(reference.df, rel=1e-12)


def _result(key: str, values: list[float]) -> dict:
    return {
        "pick_by": "accuracy",
        "final_pick": {"candidate_key": key},
        "outer": [{"scores": {"accuracy": v}, "n_train": 80, "n_test": 20} for v in values],
    }


def test_comparison_names_its_test_and_sets_the_status() -> None:
    old = _result("a", [0.80, 0.82, 0.78, 0.81, 0.79])
    same_folds = ["f1", "f2", "f3", "f4", "f5"]
    shifted = _result("b", [0.70, 0.71, 0.69, 0.72, 0.70])
    paired = compare_results(
        shifted, old, new_folds=same_folds, old_folds=same_folds, threshold=None
    )
    assert paired["test"] == "nadeau_bengio_corrected_t" and paired["df"] == 4
    assert paired["pick_changed"] and paired["moved"] and paired["p_value"] < 0.05
    assert refresh_status(paired) == "pick_changed"
    unpaired = compare_results(
        shifted, old, new_folds=["g1"] * 5, old_folds=same_folds, threshold=0.75
    )
    assert unpaired["test"] == "welch_t"
    assert refresh_status(unpaired) == "degraded"  # below the threshold wins
    steady = compare_results(
        _result("a", [0.80, 0.81, 0.79, 0.80, 0.80]),
        old,
        new_folds=same_folds,
        old_folds=same_folds,
        threshold=0.5,
    )
    assert not steady["moved"] and not steady["pick_changed"]
    assert refresh_status(steady) == "reselected"


def _with_interval(metric: str, values: list[float], level: float = 0.9) -> dict:
    """A result whose pick_by estimate carries an interval: here a plain t interval from scipy
    (the rule under test reads only its bounds, whichever method made them)."""
    mean = float(np.mean(values))
    half = stats.t.ppf(0.5 + level / 2, len(values) - 1) * stats.sem(values)
    interval = {"method": "quick", "level": level, "lower": mean - half, "upper": mean + half}
    return {
        "pick_by": metric,
        "final_pick": {"candidate_key": "a"},
        "outer": [{"scores": {metric: v}, "n_train": 80, "n_test": 20} for v in values],
        "estimate": {metric: {"mean": mean, "interval": interval}},
    }


def test_degraded_on_the_interval_fires_only_when_its_better_bound_is_below() -> None:
    # the rule is ours (docs/schedules.md): scores are "greater is better" as scikit-learn's
    # scorers define them (scikit-learn user guide, "The scoring parameter"), so the better
    # bound is always the upper one
    result = _with_interval("accuracy", [0.70, 0.74, 0.66, 0.72, 0.68])
    upper = result["estimate"]["accuracy"]["interval"]["upper"]
    assert 0.70 < upper < 0.75
    on_estimate = compare_results(result, None, new_folds=[], old_folds=[], threshold=0.71)
    on_interval = compare_results(
        result, None, new_folds=[], old_folds=[], threshold=0.71, degraded_on="interval"
    )
    assert refresh_status(on_estimate) == "degraded"  # the mean 0.70 is below 0.71
    assert on_interval["judged_on"] == "interval_upper" and on_interval["judged_value"] == upper
    assert refresh_status(on_interval) == "reselected"  # the interval still reaches past 0.71
    confidently_low = compare_results(
        result, None, new_folds=[], old_folds=[], threshold=0.76, degraded_on="interval"
    )
    assert refresh_status(confidently_low) == "degraded"


def test_degraded_on_the_interval_of_a_negated_loss_reads_the_smallest_loss() -> None:
    # scikit-learn reports the squared error negated (neg_mean_squared_error, greater is
    # better): the interval's upper bound is minus the smallest plausible squared error
    x, y = load_diabetes(return_X_y=True)
    scores = cross_val_score(
        Ridge(alpha=1.0),
        x,
        y,
        cv=KFold(5, shuffle=True, random_state=0),
        scoring="neg_mean_squared_error",
    )
    result = _with_interval("neg_mean_squared_error", list(scores))
    interval = result["estimate"]["neg_mean_squared_error"]["interval"]
    smallest_loss = -interval["upper"]
    assert smallest_loss < -float(np.mean(scores))  # better than the estimate's loss
    # a loss limit L is the threshold -L on the negated scale; a limit just under the smallest
    # plausible loss fires, one just over it does not
    threshold = -(smallest_loss - 1.0)
    fired = compare_results(
        result, None, new_folds=[], old_folds=[], threshold=threshold, degraded_on="interval"
    )
    assert refresh_status(fired) == "degraded"
    held = compare_results(
        result, None, new_folds=[], old_folds=[], threshold=threshold - 2.0, degraded_on="interval"
    )
    assert refresh_status(held) == "reselected"


def test_degraded_on_the_interval_without_one_judges_the_estimate() -> None:
    no_interval = _result("a", [0.60, 0.62, 0.58])  # e.g. a time-ordered split: no interval
    found = compare_results(
        no_interval, None, new_folds=[], old_folds=[], threshold=0.7, degraded_on="interval"
    )
    assert found["judged_on"] == "estimate" and refresh_status(found) == "degraded"
