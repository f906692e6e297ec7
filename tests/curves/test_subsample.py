"""The engine's subsample: deterministic, stratified, nested across sizes, test folds untouched."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer

from service.cv.plan import build_plan
from service.cv.spec import SelectionSpec
from service.cv.splits import fold_fingerprint
from service.cv.subsample import kept_count, subsample_rows
from service.datasets.kinds import infer_column_kinds

from .requests import SELECTION

FRAME = load_breast_cancer(as_frame=True).frame
KINDS = infer_column_kinds(FRAME)
SPEC = {k: v for k, v in SELECTION.items() if k != "dataset"}


def _plan(**changes: object):  # type: ignore[no-untyped-def]
    return build_plan(SelectionSpec.model_validate(SPEC | changes), FRAME, KINDS)


def test_the_same_seed_draws_the_same_rows_and_another_seed_other_rows() -> None:
    y = FRAME["target"].to_numpy()
    rows = np.arange(0, len(y), 2)
    first = subsample_rows(rows, y, 0.3, seed=7, stream=(0, 1))
    assert np.array_equal(first, subsample_rows(rows, y, 0.3, seed=7, stream=(0, 1)))
    assert not np.array_equal(first, subsample_rows(rows, y, 0.3, seed=8, stream=(0, 1)))
    assert not np.array_equal(first, subsample_rows(rows, y, 0.3, seed=7, stream=(0, 2)))


@pytest.mark.parametrize("fraction", [0.1, 0.25, 0.33, 0.5, 0.9])
def test_each_class_keeps_its_share_within_one_row(fraction: float) -> None:
    plan = _plan()
    for fold in plan.outer:
        kept = subsample_rows(fold.train, plan.y, fraction, seed=0, stream=(0, fold.index))
        assert len(set(kept.tolist())) == len(kept) and set(kept) <= set(fold.train)
        assert np.all(np.diff(kept) > 0)  # original order, so the inner plan sees X[kept]
        for label in (0, 1):
            have = int(np.sum(plan.y[fold.train] == label))
            got = int(np.sum(plan.y[kept] == label))
            assert abs(got - fraction * have) <= 1, (label, got, have)


def test_a_smaller_share_is_inside_a_larger_one() -> None:
    y = FRAME["target"].to_numpy()
    rows = np.arange(len(y))
    previous: set[int] = set()
    for fraction in (0.1, 0.25, 0.5, 0.75, 1.0):
        kept = set(subsample_rows(rows, y, fraction, seed=3).tolist())
        assert previous <= kept
        previous = kept
    assert previous == set(rows.tolist())


def test_regression_draws_the_rounded_share_without_strata() -> None:
    rows = np.arange(101)
    kept = subsample_rows(rows, None, 0.25, seed=0)
    assert len(kept) == 25 == kept_count(0.25, 101)  # 25.25 rounds to 25
    assert kept_count(0.5, 101) == 51  # 50.5 rounds half up
    assert kept_count(0.001, 10) == 1  # never an empty part


def test_plan_subsamples_training_parts_and_keeps_test_folds() -> None:
    full, half = _plan(), _plan(train_fraction=0.5, subsample_seed=4)
    for a, b in zip(full.outer, half.outer, strict=True):
        assert np.array_equal(a.test, b.test)
        assert set(b.train) < set(a.train)
        assert b.fingerprint == fold_fingerprint(
            b.train,
            b.test,
            full.n_rows,
            ";".join(f"{k}={v}" for k, v in sorted(full.versions.items())),
        )
        assert b.fingerprint != a.fingerprint
        # the inner plan splits only the kept rows
        inner_rows = set(np.concatenate([f.train for f in half.inner[b.scope]]).tolist())
        assert inner_rows == set(b.train.tolist())
    # the final pick is still made on all rows
    assert [f.fingerprint for f in full.inner["all"]] == [f.fingerprint for f in half.inner["all"]]
    assert [f.fingerprint for f in _plan(train_fraction=1.0).outer] == [
        f.fingerprint for f in full.outer
    ]


def test_subsampling_refuses_grouped_or_time_ordered_plans() -> None:
    with pytest.raises(ValueError, match="train_fraction"):
        SelectionSpec.model_validate(
            SPEC | {"train_fraction": 0.5, "inner": {"method": "time_series", "order_by": "x"}}
        )
