"""Logical column kinds: what a column means, independent of how a file format stored it."""

from __future__ import annotations

from typing import Literal

import pandas as pd
from pandas.api import types as ptypes

ColumnKind = Literal["numeric", "categorical", "boolean", "datetime"]

_BOOLEAN_WORDS = frozenset({"true", "false"})


def infer_column_kinds(frame: pd.DataFrame) -> dict[str, ColumnKind]:
    """Map each column name (as str) to its logical kind, in column order."""
    return {str(name): infer_series_kind(frame.iloc[:, i]) for i, name in enumerate(frame.columns)}


def infer_series_kind(series: pd.Series) -> ColumnKind:
    """Return the logical kind of one column."""
    dtype = series.dtype
    # bool counts as numeric to pandas, so it has to be recognised first.
    if ptypes.is_bool_dtype(dtype):
        return "boolean"
    if isinstance(dtype, pd.CategoricalDtype):
        return "categorical"
    # Complex numbers cannot become float64 without losing a part, so they are kept as text.
    if ptypes.is_numeric_dtype(dtype) and not ptypes.is_complex_dtype(dtype):
        return "numeric"
    if ptypes.is_datetime64_any_dtype(dtype):
        return "datetime"
    if (ptypes.is_object_dtype(dtype) or ptypes.is_string_dtype(dtype)) and looks_boolean(series):
        return "boolean"
    return "categorical"


def looks_boolean(series: pd.Series) -> bool:
    """True when every non-missing value is a bool or the word true/false in any case."""
    present = series.dropna()
    # An all-missing column carries no evidence of being boolean; calling it that would be a guess.
    if present.empty:
        return False
    # str(True) is "True", so Python and numpy bools held in an object column pass the same test.
    words = present.astype(str).str.strip().str.lower()
    return bool(words.isin(_BOOLEAN_WORDS).all())
