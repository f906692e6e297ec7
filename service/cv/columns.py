"""Column types a request declares, applied to the table before anything else looks at it.

The stored table (and its content hash) is never changed: a declared type is a reading of the
table for one job, so it belongs to the candidates' keys (candidates.py), not to the dataset.
"""

from __future__ import annotations

import re
import warnings

import pandas as pd

from service.cv.errors import SpecError
from service.cv.recipe_spec import ColumnType

# the directives Python's strptime knows; anything else after a % is refused up front
_DIRECTIVES = set("aAbBcdfGHIjmMpSuUVwWxXyYzZ%")
_TRUE, _FALSE = {"true", "1", "1.0", "yes"}, {"false", "0", "0.0", "no"}
ISO_EXAMPLE = '{"kind": "datetime", "format": "%m/%d/%Y"}'


def check_format(name: str, fmt: str) -> None:
    """Refuse a strptime format with no directive or an unknown one."""
    field = f"columns.{name}.format"
    directives = re.findall(r"%(.)", fmt.replace("%%", ""))
    unknown = sorted({d for d in directives if d not in _DIRECTIVES})
    if unknown:
        raise SpecError(
            field,
            f"%{unknown[0]} is not a strptime directive; write the format with directives "
            "such as %Y, %m, %d, %H, %M, %S.",
        )
    if not directives:
        raise SpecError(
            field, f"format {fmt!r} has no % directive; write it like '%m/%d/%Y' or '%Y-%m-%d'."
        )


def _example(values: pd.Series) -> str:
    present = values.dropna()
    return repr(str(present.iloc[0])) if len(present) else "none"


def _as_datetime(name: str, col: pd.Series, fmt: str | None) -> pd.Series:
    if pd.api.types.is_datetime64_any_dtype(col.dtype):
        return col  # already instants (a Parquet timestamp, an ISO 8601 CSV column)
    if pd.api.types.is_numeric_dtype(col.dtype) or pd.api.types.is_bool_dtype(col.dtype):
        raise SpecError(
            f"columns.{name}.kind",
            f"column {name!r} holds numbers, not dates written as text; declare it numeric "
            "(a number orders time just as well) or leave it out of columns.",
        )
    text = col.astype("string").str.strip()
    present = text.notna()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # pandas' "could not infer format" is replaced below
        parsed = pd.to_datetime(
            text, format=fmt if fmt is not None else "ISO8601", errors="coerce", utc=True
        )
    failed = present & parsed.isna()
    if failed.any():
        bad = text[failed].iloc[0]
        if fmt is None:
            raise SpecError(
                f"columns.{name}.format",
                f"column {name!r} holds dates that are not ISO 8601 (e.g. {bad!r}); give their "
                f"format, e.g. {ISO_EXAMPLE}.",
            )
        raise SpecError(
            f"columns.{name}.format",
            f"{int(failed.sum())} values of column {name!r} do not match format {fmt!r} "
            f"(e.g. {bad!r}); correct the format or the values.",
        )
    return parsed


def _as_numeric(name: str, col: pd.Series) -> pd.Series:
    if pd.api.types.is_datetime64_any_dtype(col.dtype):
        return (col - pd.Timestamp(0, tz="UTC")) / pd.Timedelta(days=1)
    if pd.api.types.is_bool_dtype(col.dtype):
        return col.astype("float64")
    values = pd.to_numeric(col.astype(object).where(col.notna(), None), errors="coerce")
    failed = col.notna() & values.isna()
    if failed.any():
        raise SpecError(
            f"columns.{name}.kind",
            f"column {name!r} has values that are not numbers (e.g. "
            f"{str(col[failed].iloc[0])!r}); declare it categorical or clean the values.",
        )
    return values.astype("float64")


def _as_boolean(name: str, col: pd.Series) -> pd.Series:
    words = col.astype("string").str.strip().str.lower()
    known = words.isin(_TRUE | _FALSE) | words.isna()
    if not known.all():
        raise SpecError(
            f"columns.{name}.kind",
            f"column {name!r} has values that are not true/false, yes/no or 1/0 (e.g. "
            f"{str(col[~known].iloc[0])!r}); declare it categorical.",
        )
    return words.isin(_TRUE).astype("boolean").where(words.notna(), pd.NA)


def apply_column_types(
    frame: pd.DataFrame, kinds: dict[str, str], columns: dict[str, ColumnType]
) -> tuple[pd.DataFrame, dict[str, str]]:
    """The frame and kinds as the request declares them; SpecError naming the column."""
    if not columns:
        return frame, kinds
    frame, kinds = frame.copy(), dict(kinds)
    for name, declared in columns.items():
        if name not in frame.columns:
            cols = ", ".join(map(str, frame.columns[:8])) + (", ..." if frame.shape[1] > 8 else "")
            raise SpecError(f"columns.{name}", f"column {name!r} is not in the table ({cols}).")
        if declared.format is not None:
            check_format(name, declared.format)
        col = frame[name]
        if declared.kind == "datetime":
            frame[name] = _as_datetime(name, col, declared.format)
        elif declared.kind == "numeric":
            frame[name] = _as_numeric(name, col)
        elif declared.kind == "boolean":
            frame[name] = _as_boolean(name, col)
        else:
            frame[name] = col.astype("string")
        kinds[name] = declared.kind
    return frame, kinds


def order_values(name: str, col: pd.Series, kind: str, field: str) -> pd.Series:
    """The values that order rows in time: numbers, or instants as int64 nanoseconds."""
    if kind == "datetime":
        stamps = col if pd.api.types.is_datetime64_any_dtype(col.dtype) else pd.to_datetime(col)
        if stamps.dt.tz is None:  # naive stamps are UTC, as the canonical table takes them
            stamps = stamps.dt.tz_localize("UTC")
        return stamps.astype("datetime64[ns, UTC]").astype("int64")
    if kind == "numeric":
        return col.astype("float64")
    raise SpecError(
        field,
        f"order column {name!r} is {kind}, not numeric or datetime, so its values would sort "
        f'as text (every January first); declare it with its format in columns, e.g. "columns": '
        f'{{"{name}": {ISO_EXAMPLE}}}.',
    )
