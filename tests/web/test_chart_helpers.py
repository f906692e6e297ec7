"""The chart helpers' rules: round ticks within a metric's bounds that cover the data, log axes."""

from __future__ import annotations

import itertools
import math

import pytest

from service.web.svg import Point, line_chart
from service.web.svg_grid import cell_fill, contrast, readable_ink
from service.web.ticks import (
    fit_label,
    linear_axis,
    log_axis,
    metric_bounds,
    short,
    value_axis,
    wants_log,
)


def _is_round(tick: float, step: float) -> bool:
    # a multiple of a step of the form 1, 2, 2.5 or 5 x 10^k (round numbers: common practice)
    return math.isclose(tick / step, round(tick / step), abs_tol=1e-9)


def _step(ticks: list[float]) -> float:
    return min(b - a for a, b in itertools.pairwise(ticks))


CASES = [
    # (values, metric): the first is the case seen on a report, ticks 0.8668 .. 1.006
    ([0.8668, 0.9123, 0.9819], "accuracy"),
    ([0.95, 0.99, 1.0], "accuracy"),
    ([0.5, 0.5], "roc_auc"),
    ([1.0, 1.0, 1.0], "balanced_accuracy"),
    ([0.0, 0.02], "f1_macro"),
    ([-35.2, -12.7, -30.1], "neg_mean_squared_error"),
    ([-0.3, 0.41, 0.88], "r2"),
    ([-4.0, 0.9], "r2"),
    ([123.0, 4567.0], "something_unbounded"),
    ([0.000123, 0.000131], "something_unbounded"),
]


@pytest.mark.parametrize(("values", "metric"), CASES)
def test_ticks_are_round_within_bounds_and_cover_the_data(values: list[float], metric: str) -> None:
    """Every tick a round number, none past the metric's bounds, the data between the outer two."""
    low_bound, high_bound = metric_bounds(metric)
    axis = linear_axis(values, (low_bound, high_bound))
    ticks = axis.ticks
    assert ticks == sorted(ticks) and len(ticks) >= 2
    assert 3 <= len(ticks) <= 8 or len(set(values)) == 1
    step = _step(ticks)
    mantissa = step / 10 ** math.floor(math.log10(step))
    assert any(math.isclose(mantissa, m) for m in (1, 2, 2.5, 5)), (ticks, step)
    inner = [t for t in ticks if t not in (low_bound, high_bound)]
    assert all(_is_round(t, step) for t in inner), ticks
    assert all(len(short(t).lstrip("-").replace(".", "").strip("0")) <= 4 for t in ticks), ticks
    if low_bound is not None:
        assert ticks[0] >= low_bound
    if high_bound is not None:
        assert ticks[-1] <= high_bound
    # cover the data, and go no more than one step beyond it on either side (a flat series
    # gets a small window around its one value instead)
    assert ticks[0] <= min(values) and ticks[-1] >= max(values)
    if len(set(values)) > 1:
        assert ticks[0] > min(values) - step - 1e-12 and ticks[-1] < max(values) + step + 1e-12
    else:
        assert ticks[-1] - ticks[0] <= 0.2 * max(abs(values[0]), 1.0)
    assert (axis.low, axis.high) == (ticks[0], ticks[-1])


def test_accuracy_near_one_never_gets_a_tick_above_one() -> None:
    """The report's old axis ran to 1.006 on accuracy; a bounded metric now stops at 1."""
    axis = value_axis([0.8668, 0.9819, 1.0], bounds=metric_bounds("accuracy"))
    assert max(axis.ticks) == 1.0
    assert axis.labels()[-1] == "1"


def test_metric_bounds_follow_the_scorers() -> None:
    """[0, 1] for accuracy-like scores, at most 1 for r2, at most 0 for neg_* scores."""
    assert metric_bounds("accuracy") == (0.0, 1.0)
    assert metric_bounds("roc_auc_ovr") == (0.0, 1.0)
    assert metric_bounds("r2") == (None, 1.0)
    assert metric_bounds("neg_log_loss") == (None, 0.0)
    assert metric_bounds("matthews_corrcoef") == (-1.0, 1.0)


def test_a_log_range_gets_a_log_axis_of_powers_of_ten() -> None:
    """Values drawn with log: true, or spanning two decades, sit on powers of ten."""
    drawn = [0.000173, 0.0042, 0.031, 0.77, 3.9]  # alpha drawn log-uniform from [1e-4, 10]
    assert wants_log(drawn)
    axis = value_axis(drawn)
    assert axis.log
    assert axis.ticks == [0.0001, 0.001, 0.01, 0.1, 1.0, 10.0]
    assert axis.ticks[0] <= min(drawn) and axis.ticks[-1] >= max(drawn)
    # equal steps in log10: each value's place is its log share of the axis
    assert axis.share(0.01) == pytest.approx(0.4)
    assert axis.share(1.0) == pytest.approx(0.8)


def test_a_declared_log_range_within_one_decade_still_gets_a_log_axis() -> None:
    """A range declared log: true is drawn on a log axis even when the draws are close."""
    values = [1.0, 2.0, 3.0, 7.0, 9.0]  # min_samples_leaf drawn log-uniform from [1, 10]
    assert not wants_log(values)
    assert wants_log(values, declared=True)
    axis = value_axis(values, declared_log=True)
    assert axis.log and axis.ticks[0] <= 1.0 and axis.ticks[-1] >= 9.0
    assert all(short(t) in {"1", "2", "5", "10"} for t in axis.ticks)


def test_no_log_axis_for_values_that_touch_zero_or_a_small_spread() -> None:
    """Zero or negative values, or a spread under two decades, stay on a linear axis."""
    assert not wants_log([0.0, 1.0, 100.0])
    assert not wants_log([-1.0, 10.0])
    assert not wants_log([1.0, 5.0, 9.0, 15.0, 25.0])
    assert not value_axis([1.0, 5.0, 25.0]).log
    assert log_axis([5.0, 50.0]).ticks == [1.0, 10.0, 100.0]
    assert log_axis([2.0, 9.0]).ticks == [2.0, 5.0, 10.0]


def test_numbers_print_to_four_significant_figures_without_float_noise() -> None:
    """0.1 + 0.2 prints as 0.3; a drawn 0.0123456789 as 0.01235."""
    assert short(0.1 + 0.2) == "0.3"
    assert short(0.0123456789) == "0.01235"
    assert short(-0.0) == "0"
    assert short(0.96667, 3) == "0.967"


def test_labels_wrap_and_are_abbreviated_only_when_they_must() -> None:
    """A short label stays whole; a long one wraps after commas and ends in '…' when cut."""
    assert fit_label("SVC(C=1)", 20) == ["SVC(C=1)"]
    lines = fit_label("LogisticRegression(C=0.1, max_iter=2000)", 26)
    assert lines == ["LogisticRegression(C=0.1,", "max_iter=2000)"]
    cut = fit_label("KNeighborsClassifier(n_neighbors=15, weights=distance, p=2)", 24)
    assert len(cut) == 2 and cut[-1].endswith("…")
    assert all(len(line) <= 24 for line in cut)


def test_heat_map_values_keep_wcag_contrast_on_every_fill() -> None:
    """The value printed in a cell contrasts at least 4.5:1 with its fill (WCAG 2 AA)."""
    for step in range(101):
        fill = cell_fill(step / 100)
        ink = readable_ink(fill)
        rgb = tuple(int(ink[i : i + 2], 16) for i in (1, 3, 5))
        assert contrast(fill, rgb) >= 4.5, (step, fill, ink)  # type: ignore[arg-type]


def test_a_refresh_point_is_ringed_and_says_so() -> None:
    """A job run by a schedule carries its note and a ring; other points have neither."""
    points = [
        Point("Dec 01\n03:00", 0.91, 1, ref="a"),
        Point("Dec 02\n03:00", 0.88, 1, "refresh by a schedule: degraded", "b"),
    ]
    markup = str(
        line_chart(
            [("3 candidates, accuracy", points)],
            [p.x for p in points],
            label="history",
            kind="history-point",
            y_title="nested accuracy",
            bounds=metric_bounds("accuracy"),
        )
    )
    assert markup.count('data-note="refresh by a schedule: degraded"') == 1
    assert markup.count('r="8"') == 1
    assert 'data-job="a"' in markup and 'data-job="b"' in markup
    assert "refresh by a schedule: degraded</title>" in markup
