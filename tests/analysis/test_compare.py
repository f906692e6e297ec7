"""Comparing two selections: the corrected resampled t-test by hand and over HTTP."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import make_moons
from sklearn.model_selection import RepeatedStratifiedKFold, cross_val_score
from sklearn.svm import SVC
from sqlalchemy import text

from service.analysis.compare import (
    compare_outer_scores,
    corrected_t_test,
    outer_scores_from_result,
    welch_t_test,
)

from .conftest import Seeded


def test_corrected_t_reproduces_the_published_worked_example() -> None:
    # Source: Nadeau & Bengio (2003), Machine Learning 52:239-281, corrected resampled t:
    #   t = mean(d) / sqrt((1/J + n_test/n_train) * s^2),  s^2 = ddof=1 variance of the J
    #   per-fold differences, df = J - 1.
    # Worked check (scikit-learn's example "Statistical comparison of models using grid
    # search", docs/references.md [V, rerun]): make_moons(100, noise=0.352, random_state=1),
    # SVC(random_state=0) rbf vs linear, RepeatedStratifiedKFold(10, 10, random_state=0), roc_auc.
    X, y = make_moons(n_samples=100, noise=0.352, random_state=1)
    cv = RepeatedStratifiedKFold(n_splits=10, n_repeats=10, random_state=0)
    rbf = cross_val_score(SVC(kernel="rbf", random_state=0), X, y, cv=cv, scoring="roc_auc")
    linear = cross_val_score(SVC(kernel="linear", random_state=0), X, y, cv=cv, scoring="roc_auc")
    differences = rbf - linear
    # the example's published figures: mean difference 0.0100, variance 0.00146667
    assert differences.mean() == pytest.approx(0.0100, abs=5e-5)
    assert differences.var(ddof=1) == pytest.approx(0.00146667, rel=1e-3)

    # By hand from the published inputs: J = 10 x 10 = 100, n_test/n_train = 10/90.
    #   1/J + n_test/n_train = 0.01 + 0.111111 = 0.121111
    #   0.121111 * 0.00146667 = 1.776296e-4, sqrt = 0.0133278
    #   t = 0.0100 / 0.0133278 = 0.7503;  one-sided p = t.sf(0.7503, 99) = 0.227
    by_hand_t = 0.0100 / math.sqrt((1 / 100 + 10 / 90) * 0.00146667)
    assert by_hand_t == pytest.approx(0.750, abs=5e-4)

    test = corrected_t_test(list(differences), n_train=90, n_test=10)
    assert test.n_folds == 100 and test.df == 99
    assert test.test_train_ratio == pytest.approx(10 / 90)
    assert test.t == pytest.approx(0.750, abs=1e-3)  # published: corrected t = 0.750
    assert test.p_value / 2 == pytest.approx(0.227, abs=1e-3)  # published: one-sided p = 0.227
    # The uncorrected paired t of the same example is 2.611 (published): the correction matters.
    uncorrected = differences.mean() / math.sqrt(differences.var(ddof=1) / 100)
    assert uncorrected == pytest.approx(2.611, abs=1e-3)


def test_corrected_t_with_the_published_summary_inputs() -> None:
    # 100 differences built to have exactly the example's mean 0.0100 and variance 0.00146667
    # (Nadeau & Bengio 2003 formula as above; published t = 0.750, one-sided p = 0.227).
    z = np.linspace(-1.0, 1.0, 100)
    z = (z - z.mean()) / z.std(ddof=1)
    differences = 0.0100 + math.sqrt(0.00146667) * z
    test = corrected_t_test(list(differences), n_train=90, n_test=10)
    assert test.mean_difference == pytest.approx(0.0100, abs=1e-12)
    assert test.variance == pytest.approx(0.00146667, rel=1e-9)
    assert test.t == pytest.approx(0.750, abs=1e-3)
    assert stats.t.sf(test.t, 99) == pytest.approx(0.227, abs=1e-3)
    assert test.p_value == pytest.approx(2 * stats.t.sf(test.t, 99))


def test_identical_folds_give_t_zero_and_p_one() -> None:
    # A job compared with itself: every difference is 0, so there is no evidence of a
    # difference; we define t = 0 (the formula alone would be 0/0) and p = 1.
    test = corrected_t_test([0.0] * 6, n_train=100, n_test=50)
    assert (test.t, test.p_value, test.variance) == (0.0, 1.0, 0.0)


def _stored_result(method: str | None, offset: float) -> dict[str, Any]:
    # only the parts of result v1 a comparison reads: per-fold scores, sizes, the interval
    outer = [
        {"n_train": 100, "n_test": 50, "scores": {"accuracy": 0.8 + offset + 0.01 * i**2}}
        for i in range(3)
    ]
    interval = None if method is None else {"method": method, "level": 0.9}
    return {
        "outer": outer,
        "metrics": ["accuracy"],
        "dataset_hash": "d" * 64,
        "estimate": {"accuracy": {"mean": 0.81 + offset, "interval": interval}},
    }


@pytest.mark.parametrize(
    ("left", "right", "said"),
    [("nested", "nested", True), ("nested", "quick", False), ("quick", None, False)],
)
def test_the_difference_says_why_it_keeps_the_t_interval_when_both_jobs_are_nested(
    left: str, right: str | None, said: bool
) -> None:
    folds = ["f0", "f1", "f2"]
    comparison = compare_outer_scores(
        outer_scores_from_result("a", _stored_result(left, 0.0), folds),
        outer_scores_from_result("b", _stored_result(right, 0.02), folds),
    )
    nested = [c for c in comparison.caveats if "nested interval" in c]
    assert bool(nested) is said
    if said:
        assert "on accuracy" in nested[0] and "corrected resampled t" in nested[0]
    assert comparison.metrics[0].test.test == "corrected_resampled_t"


def test_welch_matches_scipy() -> None:
    left, right = [0.9, 0.94, 0.96], [0.8, 0.9, 0.85, 0.82]
    ours = welch_t_test(left, right)
    # scipy.stats.ttest_ind(equal_var=False) is the reference for Welch's test
    reference = stats.ttest_ind(left, right, equal_var=False)
    assert ours.t == pytest.approx(reference.statistic)
    assert ours.p_value == pytest.approx(reference.pvalue)
    assert ours.df == pytest.approx(reference.df)


def _outer_fingerprints(seeded: Seeded, job_id: str) -> list[str]:
    with seeded.server.sessions() as session:
        rows = session.execute(
            text(
                "SELECT fingerprint FROM job_fold WHERE job_id = :j AND role = 'outer' "
                "ORDER BY repeat, fold_index"
            ),
            {"j": job_id},
        )
        return [r[0] for r in rows]


def _compare(seeded: Seeded, token: str, jobs: str) -> Any:
    with seeded.server.client(token) as client:
        return client.get("/v1/compare", params={"jobs": jobs})


def test_two_jobs_on_the_same_folds_get_the_corrected_test(seeded: Seeded) -> None:
    a, b = seeded.jobs["A"], seeded.jobs["B"]
    answer = _compare(seeded, seeded.lab, f"{a['id']},{b['id']}")
    assert answer.status_code == 200, answer.text
    body = answer.json()
    assert body["same_folds"] is True and "corrected resampled t-test" in body["statement"]
    assert body["fingerprints"] == _outer_fingerprints(seeded, a["id"])
    assert body["fingerprints"] == _outer_fingerprints(seeded, b["id"])
    assert any("no unbiased estimator" in c for c in body["caveats"])
    assert [m["metric"] for m in body["metrics"]] == ["accuracy", "balanced_accuracy"]
    for row in body["metrics"]:
        metric = row["metric"]
        left = np.array([f["scores"][metric] for f in a["result"]["outer"]])
        right = np.array([f["scores"][metric] for f in b["result"]["outer"]])
        d = left - right
        assert row["differences"] == pytest.approx(list(d))
        # Nadeau & Bengio (2003): J = repeats x k = 2 x 3 = 6; iris 150 rows, 3 stratified folds
        # of 50 -> n_test/n_train = 50/100.
        j = 6
        test = row["test"]
        assert (test["test"], test["n_folds"], test["df"]) == ("corrected_resampled_t", j, j - 1)
        assert test["test_train_ratio"] == pytest.approx(50 / 100)
        if d.var(ddof=1) == 0:
            assert d.mean() != 0 or (test["t"] == 0 and test["p_value"] == 1)
            continue
        t = d.mean() / math.sqrt((1 / j + 50 / 100) * d.var(ddof=1))
        assert test["t"] == pytest.approx(t)
        assert test["p_value"] == pytest.approx(2 * stats.t.sf(abs(t), j - 1))


def test_the_difference_carries_the_quick_interval_by_hand(seeded: Seeded) -> None:
    """/v1/compare's interval on the mean difference equals a hand computation with scipy's t.

    Source: Nadeau & Bengio (2003), Machine Learning 52:239-281, the corrected resampled t:
    se = sqrt((1/J + n_test/n_train) * s^2) over the J per-fold differences, df = J - 1,
    bounds mean -/+ t_{df}(0.5 + level/2) * se; the default level is 0.9, as for an estimate.
    """
    a, b = seeded.jobs["A"], seeded.jobs["B"]
    body = _compare(seeded, seeded.lab, f"{a['id']},{b['id']}").json()
    checked = 0
    for row in body["metrics"]:
        metric = row["metric"]
        left = np.array([f["scores"][metric] for f in a["result"]["outer"]])
        right = np.array([f["scores"][metric] for f in b["result"]["outer"]])
        d = left - right
        j, ratio = 6, 50 / 100  # 2 repeats x 3 folds of iris; 50 test rows, 100 training rows
        se = math.sqrt((1 / j + ratio) * d.var(ddof=1))
        half = stats.t.ppf(0.95, j - 1) * se
        interval = row["interval"]
        assert set(interval) == {"method", "level", "lower", "upper", "se", "df", "source"}
        assert (interval["method"], interval["level"], interval["df"]) == ("quick", 0.9, j - 1)
        assert "Nadeau & Bengio 2003" in interval["source"]
        assert interval["se"] == pytest.approx(se, rel=1e-12, abs=1e-15)
        assert interval["lower"] == pytest.approx(d.mean() - half, rel=1e-12, abs=1e-15)
        assert interval["upper"] == pytest.approx(d.mean() + half, rel=1e-12, abs=1e-15)
        checked += d.var(ddof=1) > 0
    assert checked >= 1  # at least one metric whose differences vary, so the width is tested


def test_different_folds_get_welch_s_interval(seeded: Seeded) -> None:
    """Different folds: Welch's interval, equal to scipy's ttest_ind confidence interval."""
    a, c = seeded.jobs["A"], seeded.jobs["C"]
    body = _compare(seeded, seeded.lab, f"{a['id']},{c['id']}").json()
    for row in body["metrics"]:
        left = [f["scores"][row["metric"]] for f in a["result"]["outer"]]
        right = [f["scores"][row["metric"]] for f in c["result"]["outer"]]
        # Reference: scipy.stats.ttest_ind(equal_var=False).confidence_interval (Welch 1947)
        reference = stats.ttest_ind(left, right, equal_var=False).confidence_interval(0.9)
        assert row["interval"]["method"] == "welch"
        assert row["interval"]["lower"] == pytest.approx(float(reference.low))
        assert row["interval"]["upper"] == pytest.approx(float(reference.high))


def test_a_job_compared_with_itself_gives_p_one(seeded: Seeded) -> None:
    a = seeded.jobs["A"]["id"]
    body = _compare(seeded, seeded.lab, f"{a},{a}").json()
    assert body["same_folds"] is True
    for row in body["metrics"]:
        assert row["differences"] == [0.0] * 6
        assert row["test"]["t"] == 0.0 and row["test"]["p_value"] == 1.0
        assert row["interval"]["lower"] == row["interval"]["upper"] == 0.0


def test_different_folds_get_the_weaker_welch_statement(seeded: Seeded) -> None:
    a, c = seeded.jobs["A"], seeded.jobs["C"]
    body = _compare(seeded, seeded.lab, f"{a['id']},{c['id']}").json()
    assert body["same_folds"] is False and body["fingerprints"] is None
    assert "comparison is weaker" in body["statement"] and "Welch" in body["statement"]
    for row in body["metrics"]:
        assert row["differences"] is None and row["test"]["test"] == "welch_t"
        left = [f["scores"][row["metric"]] for f in a["result"]["outer"]]
        right = [f["scores"][row["metric"]] for f in c["result"]["outer"]]
        assert (len(left), len(right)) == (6, 3)
        # scipy's Welch test is the reference
        reference = stats.ttest_ind(left, right, equal_var=False)
        assert row["test"]["p_value"] == pytest.approx(reference.pvalue)


@pytest.mark.parametrize(
    ("letters", "who", "needle"),
    [
        ("AD", "lab", "is visible"),  # D is the other team's: as if it did not exist
        ("AD", "analyst", "different datasets"),
        ("A", "lab", "exactly two job ids"),
        ("A?", "lab", "is visible"),
    ],
)
def test_bad_comparisons_are_422_problems_naming_jobs(
    seeded: Seeded, letters: str, who: str, needle: str
) -> None:
    ids = [seeded.jobs[x]["id"] if x in seeded.jobs else "nosuchjob" for x in letters]
    token = seeded.lab if who == "lab" else seeded.analyst
    answer = _compare(seeded, token, ",".join(ids))
    assert answer.status_code == 422
    assert answer.headers["content-type"].startswith("application/problem+json")
    problem = answer.json()
    assert problem["field"] == "jobs" and needle in problem["detail"]


def test_compare_without_jobs_names_the_field(seeded: Seeded) -> None:
    with seeded.server.client(seeded.lab) as client:
        answer = client.get("/v1/compare")
    assert answer.status_code == 422 and answer.json()["field"] == "jobs"
