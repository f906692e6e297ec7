"""The interval on every estimate (issue 11): the quick method's arithmetic, its published check,
its place in result v1, and the nested interval's arithmetic on hand-computed examples.

Sources: Nadeau & Bengio 2003 (Machine Learning 52:239-281) and Bouckaert & Frank 2004 (PAKDD) for
the corrected resampled t; scikit-learn's example "Statistical comparison of models using grid
search" for its worked values; Bates, Hastie & Tibshirani 2024 (JASA 119:1434-1445, Algorithm 1)
for the nested interval, with the formulas as docs/references.md restates them.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import make_moons
from sklearn.model_selection import (
    PredefinedSplit,
    RepeatedStratifiedKFold,
    StratifiedKFold,
    cross_val_predict,
    cross_val_score,
)
from sklearn.svm import SVC

from service.config import Settings
from service.cv.intervals import attach_intervals, corrected_t
from service.cv.nested_interval import OuterFoldLosses, nested_interval
from service.cv.nested_interval_run import run_nested_interval
from service.cv.preprocess import build_pipeline

from .runs import plan_for, run_engine, run_stored
from .test_time_order import dated_diabetes, time_request

Z90 = 1.6448536269514722  # the standard normal's 0.95 quantile (tables give 1.6449)


def test_corrected_t_on_a_small_example_computed_by_hand() -> None:
    # five fold scores, 80 training and 20 test rows per fold
    found = corrected_t([0.8, 0.7, 0.9, 0.75, 0.85], 20 / 80, 0.9)
    # by hand: mean 0.8; s^2 (ddof=1) = (0 + 0.01 + 0.01 + 0.0025 + 0.0025) / 4 = 0.00625;
    # corrected variance (1/J + n_test/n_train) s^2 = (0.2 + 0.25) * 0.00625 = 0.0028125
    # (Nadeau & Bengio 2003); t with J - 1 = 4 df at 0.95 is 2.1318 (printed t tables: 2.132)
    se = math.sqrt(0.0028125)
    assert found.mean == pytest.approx(0.8)
    assert found.se == pytest.approx(se, rel=1e-12)
    assert found.df == 4
    assert found.t_quantile == pytest.approx(stats.t.ppf(0.95, 4), rel=1e-12)
    assert found.t_quantile == pytest.approx(2.132, abs=5e-4)
    assert found.lower == pytest.approx(0.8 - 2.1318468 * se, abs=1e-7)
    assert found.upper == pytest.approx(0.8 + 2.1318468 * se, abs=1e-7)
    assert (found.lower, found.upper) == pytest.approx((0.686942, 0.913058), abs=1e-6)


def test_corrected_t_reproduces_scikit_learns_published_comparison() -> None:
    # scikit-learn's example "Statistical comparison of models using grid search"
    # (docs/references.md, Nadeau & Bengio 2003): rbf minus linear SVC roc_auc over 10 x 10
    # stratified folds gives a corrected t of 0.750 and an uncorrected t of 2.611
    X, y = make_moons(n_samples=100, noise=0.352, random_state=1)
    cv = RepeatedStratifiedKFold(n_splits=10, n_repeats=10, random_state=0)
    scores = {
        kernel: cross_val_score(SVC(kernel=kernel, random_state=0), X, y, cv=cv, scoring="roc_auc")
        for kernel in ("rbf", "linear")
    }
    differences = scores["rbf"] - scores["linear"]
    assert differences.mean() == pytest.approx(0.0100, abs=5e-5)
    assert differences.var(ddof=1) == pytest.approx(0.00146667, abs=5e-8)
    corrected = corrected_t(differences, 10 / 90, 0.9)
    uncorrected = corrected_t(differences, 0.0, 0.9)
    assert round(corrected.mean / corrected.se, 3) == 0.750
    assert round(uncorrected.mean / uncorrected.se, 3) == 2.611
    # one-sided p of the corrected t with J - 1 = 99 df, as the example prints it
    assert round(float(stats.t.sf(corrected.mean / corrected.se, corrected.df)), 3) == 0.227


def _fold(inner_error: float, losses: list[float]) -> OuterFoldLosses:
    return OuterFoldLosses(inner_error, np.asarray(losses, dtype="float64"))


def test_nested_interval_by_hand_with_the_standard_error_inside_its_clip() -> None:
    # K = 3 folds of 4 rows, R = 2 repetitions, zero-one losses
    repetitions = [
        [_fold(0.25, [0, 0, 1, 1]), _fold(0.5, [0, 0, 0, 1]), _fold(0.5, [0, 1, 1, 1])],
        [_fold(0.5, [0, 0, 1, 1]), _fold(0.5, [0, 0, 0, 0]), _fold(0.75, [1, 1, 1, 1])],
    ]
    plain_cv = [0, 0, 1, 1, 0, 0, 0, 1, 0, 1, 1, 0]  # 5 of 12 rows wrong
    found = nested_interval(repetitions, plain_cv, 0.9)
    # a_k = (e_in - mean e_out)^2: 1/16, 1/16, 1/16 | 0, 1/4, 1/16 -> mean(a) = 1/12
    # b_k = var(e_out, ddof=1) / 4: 1/12, 1/16, 1/16 | 1/12, 0, 0 -> mean(b) = 7/144
    # MSE = mean(a) - mean(b) = 5/144 (Bates et al. 2024, Algorithm 1, the MSE estimate)
    assert found.mse == pytest.approx(5 / 144, rel=1e-12)
    # SE = sqrt(K/(K-1) * MSE) = sqrt(1.5 * 5/144) = sqrt(7.5)/12
    assert found.se_unclipped == pytest.approx(math.sqrt(7.5) / 12, rel=1e-12)
    # SE_naive = sd(plain losses)/sqrt(n) = sqrt(35/132)/sqrt(12) = sqrt(35/1584); the clip
    # [SE_naive, sqrt(3) SE_naive] = [0.1486, 0.2575] holds 0.2282, so SE is left as it is
    assert found.se_naive == pytest.approx(math.sqrt(35 / 1584), rel=1e-12)
    assert found.se == found.se_unclipped
    # Err_NCV = mean(0.25, 0.5, 0.5, 0.5, 0.5, 0.75) = 0.5; Err_CV = 5/12
    # bias = (1 + (K-2)/K)(Err_NCV - Err_CV) = (4/3)(1/12) = 1/9; point = 0.5 - 1/9 = 7/18
    assert (found.err_ncv, found.err_cv) == pytest.approx((0.5, 5 / 12), rel=1e-12)
    assert found.bias == pytest.approx(1 / 9, rel=1e-12)
    assert found.point == pytest.approx(7 / 18, rel=1e-12)
    # point -/+ z_0.95 SE
    half = Z90 * math.sqrt(7.5) / 12
    assert (found.lower, found.upper) == pytest.approx((7 / 18 - half, 7 / 18 + half), rel=1e-9)
    assert (found.lower, found.upper) == pytest.approx((0.013504, 0.764274), abs=1e-6)
    assert found.repetitions == 2


def test_nested_interval_by_hand_clipped_to_root_k_times_the_naive_error() -> None:
    # K = 3 folds of 2 rows, R = 1
    repetitions = [[_fold(0.5, [0, 1]), _fold(0.25, [1, 1]), _fold(0.5, [0, 0])]]
    found = nested_interval(repetitions, [0, 1, 1, 1, 0, 0], 0.9)
    # a = 0, 9/16, 1/4 -> mean 13/48; b = (1/2)/2, 0, 0 -> mean 1/12; MSE = 13/48 - 4/48 = 3/16
    assert found.mse == pytest.approx(3 / 16, rel=1e-12)
    assert found.se_unclipped == pytest.approx(math.sqrt(1.5 * 3 / 16), rel=1e-12)
    # SE_naive = sqrt(0.3)/sqrt(6) = sqrt(0.05); sqrt(K) SE_naive = sqrt(0.15) = 0.3873 < 0.5303:
    # the standard error is cut to the upper end of its clip (Bates et al. 2024, Algorithm 1)
    assert found.se_naive == pytest.approx(math.sqrt(0.05), rel=1e-12)
    assert found.se == pytest.approx(math.sqrt(0.15), rel=1e-12)
    # Err_NCV = 5/12, Err_CV = 1/2, bias = (4/3)(-1/12) = -1/9, point = 5/12 + 1/9 = 19/36
    assert found.bias == pytest.approx(-1 / 9, rel=1e-12)
    assert found.point == pytest.approx(19 / 36, rel=1e-12)
    assert found.upper - found.lower == pytest.approx(2 * Z90 * math.sqrt(0.15), rel=1e-9)


def test_nested_interval_refuses_fewer_than_three_folds() -> None:
    with pytest.raises(ValueError, match="K >= 3"):
        nested_interval([[_fold(0.5, [0, 1]), _fold(0.5, [1, 0])]], [0, 1, 1, 0], 0.9)


IRIS_JOB: dict[str, Any] = {
    "dataset": {"sample": "iris"},
    "target": "target",
    "task": "classification",
    "families": [
        {"estimator": "LogisticRegression", "fixed": {"max_iter": 500}, "grid": {"C": [0.05, 1.0]}}
    ],
    "outer": {"method": "stratified_kfold", "k": 5, "repeats": 2, "seed": 3},
    "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
    "metrics": ["accuracy", "neg_log_loss"],
    "interval": {"level": 0.8},
}


def _engine_intervals(request: dict[str, Any]) -> tuple[dict[str, Any], list[str]]:
    outcome = run_engine(request)
    cautions = attach_intervals(plan_for(request).spec, outcome.result)
    return outcome.result, cautions


def test_the_same_request_twice_gives_identical_intervals() -> None:
    first, first_cautions = _engine_intervals(IRIS_JOB)
    second, second_cautions = _engine_intervals(IRIS_JOB)
    assert first["estimate"] == second["estimate"]
    assert first_cautions == second_cautions == []
    for metric in ("accuracy", "neg_log_loss"):
        interval = first["estimate"][metric]["interval"]
        assert interval["method"] == "quick" and interval["level"] == 0.8
        assert interval["folds"] == 10 and interval["df"] == 9  # J = repeats x k
        assert interval["extra_fits"] == 0


def test_quick_in_result_v1_is_centred_on_the_plain_estimate(settings: Settings) -> None:
    result = run_stored(IRIS_JOB, settings).result
    # the ranges the interval is cut to: accuracy in [0, 1], negated log loss at most 0
    for metric, top in (("accuracy", 1.0), ("neg_log_loss", 0.0)):
        estimate = result["estimate"][metric]
        values = np.asarray(estimate["values"])
        interval = estimate["interval"]
        # reference: the plain estimate is numpy's mean of the outer fold scores, and the
        # corrected t is symmetric about it (Nadeau & Bengio 2003), unless cut to the range
        assert estimate["mean"] == pytest.approx(values.mean(), rel=1e-12)
        ratio = sum(r["n_test"] for r in result["outer"]) / sum(
            r["n_train"] for r in result["outer"]
        )
        assert ratio == pytest.approx(30 / 120)
        se = math.sqrt((1 / 10 + ratio) * values.var(ddof=1))
        assert interval["se"] == pytest.approx(se, rel=1e-12)
        half = stats.t.ppf(0.9, 9) * se
        assert interval["upper"] == pytest.approx(min(values.mean() + half, top), rel=1e-12)
        if not interval["cut_to_range"]:
            assert (interval["lower"] + interval["upper"]) / 2 == pytest.approx(estimate["mean"])
        assert interval["lower"] == pytest.approx(values.mean() - half, rel=1e-12)
        assert interval["lower"] < estimate["mean"] <= interval["upper"]


def test_a_time_ordered_split_gets_no_interval_and_a_caution_saying_why() -> None:
    frame = dated_diabetes()
    request = time_request()
    outcome = run_engine(request, frame)
    cautions = attach_intervals(plan_for(request, frame).spec, outcome.result)
    assert outcome.result["estimate"]["neg_mean_absolute_error"]["interval"] is None
    assert len(cautions) == 1 and "time_series" in cautions[0]


def test_a_metric_with_no_spread_gets_no_interval_and_a_caution() -> None:
    # a result as the engine assembles it, with every outer fold scoring 1.0 on accuracy
    spec = plan_for(IRIS_JOB).spec
    outer = [{"n_train": 120, "n_test": 30} for _ in range(10)]
    result: dict[str, Any] = {
        "outer": outer,
        "estimate": {
            "accuracy": {"mean": 1.0, "values": [1.0] * 10},
            "neg_log_loss": {"mean": -0.2, "values": [-0.1, -0.3] * 5},
        },
    }
    cautions = attach_intervals(spec, result)
    assert result["estimate"]["accuracy"]["interval"] is None
    assert result["estimate"]["neg_log_loss"]["interval"]["method"] == "quick"
    assert len(cautions) == 1 and cautions[0].startswith("No interval for accuracy:")


def test_the_in_process_nested_driver_feeds_the_arithmetic_scikit_learns_losses() -> None:
    # one candidate, so the procedure is a plain fit: every loss the driver hands to the
    # arithmetic must equal scikit-learn's cross_val_predict (the reference library) on the
    # same partitions, StratifiedKFold(3, shuffle=True, random_state=seed + r)
    request = {
        "dataset": {"sample": "breast_cancer"},
        "target": "target",
        "task": "classification",
        "families": [{"estimator": "LogisticRegression", "fixed": {"max_iter": 2000}}],
        "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
        "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
        "metrics": ["accuracy"],
    }
    plan = plan_for(request)
    found = run_nested_interval(plan, repetitions=2, seed=5)
    X, y = plan.table.X, plan.y
    pipeline = build_pipeline(plan.candidates[0], plan.table, "classification", None)
    outer_losses, inner_errors = [], []
    for seed in (5, 6):
        cv = StratifiedKFold(3, shuffle=True, random_state=seed)
        outer_losses.append(cross_val_predict(pipeline, X, y, cv=cv) != y)
        for _, fold in cv.split(X, y):
            rest = np.setdiff1d(np.arange(len(y)), fold)
            labels = np.zeros(len(y), dtype=int)
            for position, (_, part) in enumerate(cv.split(X, y)):
                labels[part] = position
            inner_cv = PredefinedSplit(labels[rest])
            predicted = cross_val_predict(pipeline, X.iloc[rest], y[rest], cv=inner_cv)
            inner_errors.append(float(np.mean(predicted != y[rest])))
    pooled = np.concatenate(outer_losses).astype(float)
    assert found.loss.err_cv == pytest.approx(pooled.mean(), rel=1e-12)
    assert found.loss.err_ncv == pytest.approx(np.mean(inner_errors), rel=1e-12)
    assert found.loss.se_naive == pytest.approx(pooled.std(ddof=1) / math.sqrt(len(y)), rel=1e-9)
    # R * K * (K - 1) inner-CV procedures plus R * K outer ones, each an inner search of one
    # candidate over 3 inner folds plus its refit (the engine searches even a lone candidate)
    assert found.fits == (2 * 3 * 2 + 2 * 3) * (1 * 3 + 1)
    # accuracy = 1 - zero-one loss: the interval is the loss interval turned around
    assert (found.lower, found.upper) == pytest.approx((1 - found.loss.upper, 1 - found.loss.lower))
    assert found.point == pytest.approx(1 - found.loss.point)


def test_a_request_that_differs_only_in_interval_reuses_every_fit(settings: Settings) -> None:
    first = run_stored(IRIS_JOB, settings).result
    second = run_stored({**IRIS_JOB, "interval": {"level": 0.95}}, settings).result
    # issue 11: the interval is not part of a candidate key or a fold fingerprint
    assert second["work"]["units_reused"] == second["work"]["units_total"]
    assert second["work"]["units_computed"] == 0
    assert second["outer"] == first["outer"]
    for metric in IRIS_JOB["metrics"]:
        wide, narrow = second["estimate"][metric]["interval"], first["estimate"][metric]["interval"]
        assert (wide["level"], narrow["level"]) == (0.95, 0.8)
        assert wide["se"] == narrow["se"]
        assert wide["upper"] - wide["lower"] > narrow["upper"] - narrow["lower"]
