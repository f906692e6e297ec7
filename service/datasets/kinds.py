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


# ISO 8601 dates and date-times as CSV writes them (pandas, spreadsheets, databases): a date,
# optionally a time with seconds and fractions, optionally "Z" or an offset
_ISO_8601 = (
    r"\d{4}-\d{2}-\d{2}"
    r"(?:[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d{1,9})?)?(?:Z|[+-]\d{2}(?::?\d{2})?)?)?"
)
# date formats seen in exported tables, tried in this order for a hint (never applied silently)
_TEXT_DATE_FORMATS = (
    "%m/%d/%Y",
    "%d/%m/%Y",
    "%d.%m.%Y",
    "%Y/%m/%d",
    "%m-%d-%Y",
    "%d-%m-%Y",
    "%d %b %Y",
    "%b %d %Y",
    "%Y%m%d",
)
OVERRIDE_NOTE = (
    'A job request\'s "columns" overrides these kinds, e.g. "columns": {"date": {"kind": '
    '"datetime", "format": "%m/%d/%Y"}, "year": {"kind": "categorical"}}.'
)


def iso_datetime_text(series: pd.Series) -> bool:
    """True when a text column's every present value is an ISO 8601 date or date-time."""
    if not (ptypes.is_object_dtype(series.dtype) or ptypes.is_string_dtype(series.dtype)):
        return False
    present = series.dropna()
    if present.empty or not all(isinstance(v, str) for v in present.head(1000)):
        return False
    return bool(present.astype(str).str.strip().str.fullmatch(_ISO_8601).all())


def parse_iso_datetimes(series: pd.Series) -> pd.Series:
    """An ISO 8601 text column as UTC instants (naive values taken as UTC, as canonical.py does)."""
    return pd.to_datetime(series.str.strip(), format="ISO8601", utc=True)


def _text_date_formats(series: pd.Series) -> list[str]:
    present = series.dropna().astype(str).str.strip()
    if present.empty or not present.str.contains(r"\d").all():
        return []
    # distinct values, so a table starting with days 1-12 of a month is not called ambiguous
    sample = present.drop_duplicates().head(2000)
    fits = []
    for fmt in _TEXT_DATE_FORMATS:
        parsed = pd.to_datetime(sample, format=fmt, errors="coerce")
        if parsed.notna().all():
            fits.append(fmt)
    return fits


def override_hint(series: pd.Series, kind: ColumnKind) -> str | None:
    """How a request could read this column otherwise, when a second reading is likely."""
    if kind == "categorical":
        formats = _text_date_formats(series)
        if formats:
            example = f'{{"kind": "datetime", "format": "{formats[0]}"}}'
            also = f" (also fits {formats[1]}: check which)" if len(formats) > 1 else ""
            return f"looks like dates written as text{also}; to use them as dates give {example}"
        return None
    if kind == "numeric":
        present = series.dropna()
        whole = bool(len(present)) and bool((present % 1 == 0).all())
        if whole and 2 < present.nunique() <= 20:
            return (
                f"{present.nunique()} distinct whole numbers; if they are codes or years used "
                'as labels, give {"kind": "categorical"}'
            )
        return None
    if kind == "datetime":
        return "used as days since 1970-01-01 by models; orders rows in time with order_by"
    return None
