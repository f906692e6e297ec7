"""The refresh comparison's tests against published worked values and scipy."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import make_moons
from sklearn.model_selection import RepeatedStratifiedKFold, cross_val_score
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
