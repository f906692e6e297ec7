"""Inferring logical column kinds."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from service.datasets.kinds import infer_column_kinds
from service.datasets.sources import DatasetSource, load_table


def test_kinds_of_mixed_frame() -> None:
    frame = pd.DataFrame(
        {
            "count": [1, 2, 3, 4],
            "ratio": [0.5, np.nan, 1.5, 2.0],
            "nullable_int": pd.array([1, None, 3, 4], dtype="Int64"),
            "city": ["Oslo", None, "Lima", "Oslo"],
            "grade": pd.Categorical(["a", "b", None, "a"]),
            "flag": [True, False, True, False],
            "flag_text": ["True", "false", None, "TRUE"],
            "yes_no": ["yes", "no", "yes", None],
            "seen_at": pd.to_datetime(["2024-01-01", None, "2024-02-01", "2024-03-01"]),
            "seen_utc": pd.to_datetime(["2024-01-01"] * 4).tz_localize("UTC"),
            "empty": pd.Series([None] * 4, dtype=object),
        }
    )
    assert infer_column_kinds(frame) == {
        "count": "numeric",
        "ratio": "numeric",
        "nullable_int": "numeric",
        "city": "categorical",
        "grade": "categorical",
        "flag": "boolean",
        "flag_text": "boolean",
        "yes_no": "categorical",
        "seen_at": "datetime",
        "seen_utc": "datetime",
        # No value to go by, so it stays the most general kind rather than a guessed boolean.
        "empty": "categorical",
    }


def test_kinds_keep_column_order_and_stringify_names() -> None:
    frame = pd.DataFrame({2: [1.0], 1: ["x"]})
    assert list(infer_column_kinds(frame).items()) == [("2", "numeric"), ("1", "categorical")]


def test_boolean_words_in_csv_become_boolean_column(tmp_path: Path) -> None:
    path = tmp_path / "flags.csv"
    path.write_text("id,active,label,score\n1,True,a,0.5\n2,false,b,\n3,,c,1.5\n4,TRUE,,2\n")
    table = load_table(DatasetSource(path=str(path)), base_dir=tmp_path)
    assert table.kinds == {
        "id": "numeric",
        "active": "boolean",
        "label": "categorical",
        "score": "numeric",
    }
    active = table.frame["active"]
    assert str(active.dtype) == "boolean"
    assert active.tolist() == [True, False, pd.NA, True]
    assert table.frame["label"].isna().tolist() == [False, False, False, True]
    assert np.isnan(table.frame["score"].iloc[1])


def test_kinds_of_canonical_frame_are_unchanged(tmp_path: Path) -> None:
    path = tmp_path / "mixed.csv"
    path.write_text("n,flag,word\n1,true,x\n2,False,\n")
    table = load_table(DatasetSource(path=str(path)), base_dir=tmp_path)
    assert (
        infer_column_kinds(table.frame)
        == table.kinds
        == {
            "n": "numeric",
            "flag": "boolean",
            "word": "categorical",
        }
    )
