"""The outer-fold scope: one formatter and one parser (service/cv/splits.py) for every reader."""

from __future__ import annotations

import numpy as np
import pytest

from service.cv.scopes import FINAL_SCOPE, outer_scope, parse_outer_scope
from service.cv.spec import SplitSpec
from service.cv.splits import SplitInputs, split_rows


@pytest.mark.parametrize(("repeat", "fold"), [(0, 0), (0, 9), (3, 12), (10, 0)])
def test_a_scope_parses_back_to_its_numbers(repeat: int, fold: int) -> None:
    assert parse_outer_scope(outer_scope(repeat, fold)) == (repeat, fold)


def test_outer_folds_are_named_by_the_formatter() -> None:
    y = np.array([0, 1] * 10)
    folds = split_rows(
        SplitSpec(method="stratified_kfold", k=5, repeats=2, seed=0),
        np.arange(20),
        SplitInputs(y, None, None),
        n_rows=20,
        versions="v",
        field="outer",
    )
    assert [f.scope for f in folds] == [outer_scope(f.repeat, f.index) for f in folds]
    assert [parse_outer_scope(f.scope) for f in folds] == [
        (r, i) for r in range(2) for i in range(5)
    ]


@pytest.mark.parametrize("scope", [FINAL_SCOPE, "r1", "f2", "r1f", "r-1f2", "r01f2", "r1f2x", ""])
def test_anything_else_is_not_an_outer_scope(scope: str) -> None:
    with pytest.raises(ValueError, match="not an outer fold scope"):
        parse_outer_scope(scope)
