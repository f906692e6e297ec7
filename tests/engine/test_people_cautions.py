"""The people caution comes from the declared context; column names only give a soft line."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
import pytest

from service.cv.cautions import PEOPLE_HINT_PREFIX, PEOPLE_PREFIX, find_cautions, people_caution
from service.datasets.kinds import infer_column_kinds

from .runs import plan_for, sample_table

REQUEST: dict[str, Any] = {
    "dataset": {"sample": "iris"},
    "target": "target",
    "task": "classification",
    "families": [{"estimator": "LogisticRegression"}],
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
    "metrics": ["accuracy"],
}


def _iris_with(column: str) -> pd.DataFrame:
    # iris ships with scikit-learn (flowers, not people); the added column is invented
    frame, _ = sample_table("iris")
    frame = frame.copy()
    frame[column] = np.random.default_rng(0).choice(["a", "b"], len(frame))
    return frame


def _cautions(frame: pd.DataFrame, **extra: Any) -> list[str]:
    plan = plan_for({**REQUEST, **extra}, frame)
    return find_cautions(plan, frame, dict(infer_column_kinds(frame)))


def test_a_sex_column_without_context_is_a_soft_line_not_the_caution() -> None:
    """A guess from a name: 'Columns that may describe people: sex.', never the banner text."""
    cautions = _cautions(_iris_with("sex"))
    assert not any(c.startswith(PEOPLE_PREFIX) for c in cautions)
    hints = [c for c in cautions if c.startswith(PEOPLE_HINT_PREFIX)]
    assert len(hints) == 1 and hints[0].startswith(f"{PEOPLE_HINT_PREFIX} sex.")


@pytest.mark.parametrize("column", ["religious", "marital_status", "applicant_income"])
def test_other_personal_columns_get_the_same_soft_line(column: str) -> None:
    """The table about marriages and affairs (a `religious` column) is named too."""
    hints = [c for c in _cautions(_iris_with(column)) if c.startswith(PEOPLE_HINT_PREFIX)]
    assert hints and f": {column}." in hints[0]


def test_a_declared_credit_context_gets_the_caution_and_no_hint() -> None:
    """decides_about_people with domain credit: the caution naming the domain, once."""
    context = {"decides_about_people": True, "domain": "credit"}
    cautions = _cautions(_iris_with("sex"), context=context)
    assert cautions.count(people_caution("credit")) == 1
    assert "(credit)" in people_caution("credit")
    assert "errors across groups" in people_caution("credit")
    assert not any(c.startswith(PEOPLE_HINT_PREFIX) for c in cautions)


def test_a_context_that_decides_nothing_about_people_keeps_the_hint_only() -> None:
    """decides_about_people false: no caution; a personal column is still named softly."""
    cautions = _cautions(_iris_with("gender"), context={"decides_about_people": False})
    assert not any(c.startswith(PEOPLE_PREFIX) for c in cautions)
    assert any(c.startswith(f"{PEOPLE_HINT_PREFIX} gender.") for c in cautions)


def test_plain_iris_and_pump_ages_name_no_people() -> None:
    """No personal column: neither line (an `age_years` of a pump is not a person's age)."""
    frame, _ = sample_table("iris")
    assert not any(c.startswith((PEOPLE_PREFIX, PEOPLE_HINT_PREFIX)) for c in _cautions(frame))
    pumps = _iris_with("age_years")
    assert not any(c.startswith(PEOPLE_HINT_PREFIX) for c in _cautions(pumps))
