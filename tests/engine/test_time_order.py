"""Time order that cannot silently go wrong: declared date formats, time split options checked
against scikit-learn's TimeSeriesSplit, refusals and cautions.

Tables: diabetes as shipped with scikit-learn (sklearn.datasets.load_diabetes), with a date
column derived from its row order.
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np
import pandas as pd
import pytest
from sklearn import datasets
from sklearn.model_selection import TimeSeriesSplit

from service.cv.cautions import find_cautions
from service.cv.errors import SpecError
from service.datasets.kinds import infer_column_kinds

from .runs import plan_for, run_engine

FORMAT = "%m/%d/%Y"


def dated_diabetes(seed: int | None = 0) -> pd.DataFrame:
    """Diabetes with `date` = one day per row from 2019-11-01 (so two New Years fall inside),
    written MM/DD/YYYY, rows shuffled so only the date column knows the time order."""
    X, y = datasets.load_diabetes(return_X_y=True, as_frame=True)
    dates = pd.date_range("2019-11-01", periods=len(y), freq="D")
    frame = X.assign(target=y, date=dates.strftime(FORMAT))
    if seed is not None:
        frame = frame.sample(frac=1.0, random_state=seed).reset_index(drop=True)
    return frame


def time_request(**outer: Any) -> dict[str, Any]:
    return {
        "dataset": {"sample": "diabetes"},
        "target": "target",
        "task": "regression",
        "families": [{"estimator": "Ridge", "grid": {"alpha": [0.1, 10.0]}}],
        "columns": {"date": {"kind": "datetime", "format": FORMAT}},
        "outer": {"method": "time_series", "k": 4, "order_by": "date", **outer},
        "inner": {"method": "time_series", "k": 3, "order_by": "date"},
        "metrics": ["neg_mean_absolute_error"],
    }


def _instants(frame: pd.DataFrame) -> np.ndarray:
    return pd.to_datetime(frame["date"], format=FORMAT).to_numpy()


def test_with_the_format_every_outer_fold_trains_on_the_past() -> None:
    frame = dated_diabetes()
    plan = plan_for(time_request(), frame)
    when = _instants(frame)
    for fold in plan.outer:
        assert when[fold.train].max() < when[fold.test].min()
        for inner in plan.inner[fold.scope]:
            assert when[inner.train].max() < when[inner.test].min()
    # sorting the text instead (what happened before) puts every January first: other folds
    text_order = np.argsort(frame["date"].to_numpy(), kind="stable")
    first_test_by_text = set(text_order[-len(plan.outer[-1].test) :])
    assert first_test_by_text != set(plan.outer[-1].test)


def test_without_the_format_the_text_order_column_is_refused() -> None:
    request = time_request()
    del request["columns"]
    with pytest.raises(SpecError) as caught:
        plan_for(request, dated_diabetes())
    assert caught.value.field == "outer.order_by"
    assert "'date'" in caught.value.message and "format" in caught.value.message
    # one sentence: no full stop followed by a capital inside it
    assert re.search(r"[.?!]\s+[A-Z]", caught.value.message) is None


def test_a_date_kind_without_format_names_a_value_that_is_not_iso() -> None:
    request = time_request()
    request["columns"] = {"date": {"kind": "datetime"}}
    with pytest.raises(SpecError) as caught:
        plan_for(request, dated_diabetes())
    assert caught.value.field == "columns.date.format"
    assert "ISO 8601" in caught.value.message


@pytest.mark.parametrize(
    "options",
    [
        {},
        {"gap": 7},
        {"max_train_size": 120},
        {"test_size": 50},
        {"gap": 3, "max_train_size": 100, "test_size": 40},
    ],
    ids=["plain", "gap", "max_train_size", "test_size", "all-three"],
)
def test_outer_and_inner_folds_equal_time_series_split(options: dict[str, int]) -> None:
    frame = dated_diabetes()
    request = time_request(**options)
    # the inner split sees an outer training part (from 90 rows): smaller test slices there
    inner_options = {**options, **({"test_size": 20} if "test_size" in options else {})}
    request["inner"].update(inner_options)
    plan = plan_for(request, frame)
    by_time = np.argsort(_instants(frame), kind="stable")  # row of the i-th instant
    # scikit-learn as the reference: TimeSeriesSplit with the same arguments on rows in time
    # order, for the outer split and for each outer training part (as a search-CV splits it)
    reference = TimeSeriesSplit(n_splits=4, **options)
    pairs = list(reference.split(np.zeros((len(frame), 1))))
    assert len(pairs) == len(plan.outer)
    for fold, (train, test) in zip(plan.outer, pairs, strict=True):
        assert fold.train.tolist() == by_time[train].tolist()
        assert fold.test.tolist() == by_time[test].tolist()
        inner_ref = TimeSeriesSplit(n_splits=3, **inner_options)
        part = fold.train  # already in time order
        inner_pairs = list(inner_ref.split(np.zeros((len(part), 1))))
        for inner, (tr, te) in zip(plan.inner[fold.scope], inner_pairs, strict=True):
            assert inner.train.tolist() == part[tr].tolist()
            assert inner.test.tolist() == part[te].tolist()


def test_the_folds_and_scores_follow_time_and_the_estimate_is_not_flattered() -> None:
    # rows in time order, with the target drifting upwards over time (a trend added to the
    # shipped target): a fold that trains on the past cannot know the later level
    frame = dated_diabetes(seed=None)
    frame["target"] = frame["target"] + np.arange(len(frame)) * 1.0
    shuffled = frame.sample(frac=1.0, random_state=1).reset_index(drop=True)
    dated = run_engine(time_request(), shuffled).result
    as_text = time_request()
    as_text["columns"] = {"date": {"kind": "categorical"}}
    with pytest.raises(SpecError):
        run_engine(as_text, shuffled)
    # the same request on the rows in their true order with a numeric position agrees
    positional = frame.assign(position=np.arange(len(frame)))
    request = time_request()
    request["columns"] = {}
    request["outer"]["order_by"] = request["inner"]["order_by"] = "position"
    request["features"] = [c for c in frame.columns if c not in ("target", "date")]
    ordered = run_engine(request, positional).result
    ours = [row["scores"]["neg_mean_absolute_error"] for row in dated["outer"]]
    theirs = [row["scores"]["neg_mean_absolute_error"] for row in ordered["outer"]]
    np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-9)
    # what sorting the text did: the same job ordered by the text's rank mixes the years into
    # every fold and reports a far smaller error than time order gives
    text_rank = frame.assign(position=frame["date"].rank(method="first").to_numpy())
    as_text_order = run_engine(request, text_rank).result
    flattered = [row["scores"]["neg_mean_absolute_error"] for row in as_text_order["outer"]]
    assert np.mean(flattered) > np.mean(ours)  # scores are negated errors


def test_a_gap_that_leaves_no_training_rows_is_refused() -> None:
    with pytest.raises(SpecError) as caught:
        plan_for(time_request(gap=400), dated_diabetes())
    assert caught.value.field == "outer.gap"
    assert "no training rows" in caught.value.message
    request = time_request()
    request["inner"]["gap"] = 200  # the first outer training part has 90 rows
    with pytest.raises(SpecError) as caught:
        plan_for(request, dated_diabetes())
    assert caught.value.field == "inner.gap"


def test_time_options_on_a_shuffled_split_are_refused() -> None:
    request = time_request()
    request["inner"] = {"method": "kfold", "k": 3, "gap": 2}
    with pytest.raises(ValueError, match="only a time_series split takes gap"):
        plan_for(request, dated_diabetes())


def _cautions(request: dict[str, Any], frame: pd.DataFrame) -> list[str]:
    plan = plan_for(request, frame)
    return find_cautions(plan, frame, dict(infer_column_kinds(frame)))


def test_caution_for_a_time_ordered_outer_split_with_a_shuffled_inner_split() -> None:
    frame = dated_diabetes()
    request = time_request()
    request["inner"] = {"method": "kfold", "k": 3, "seed": 0}
    cautions = _cautions(request, frame)
    assert any("outer split follows time" in c and "shuffles rows" in c for c in cautions)
    assert not any("outer split follows time" in c for c in _cautions(time_request(), frame))


def test_caution_for_equal_time_stamps_across_a_boundary() -> None:
    frame = dated_diabetes(seed=None)
    # ten rows per day: most boundaries cut through a day
    days = pd.date_range("2020-01-01", periods=len(frame) // 10 + 1, freq="D")
    frame["date"] = days[np.arange(len(frame)) // 10].strftime(FORMAT)
    cautions = _cautions(time_request(), frame)
    assert any("equal 'date' values" in c for c in cautions)
    assert not any("equal 'date' values" in c for c in _cautions(time_request(), dated_diabetes()))
