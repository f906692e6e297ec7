"""One logical form for a table, and the content hash computed from it.

A CSV and a Parquet file holding the same values must give the same dataset, so everything is
first brought to logical types (see `canonical_frame`), and the hash is taken over a byte stream
that depends only on those logical values, never on how pandas or a file format stored them.

Canonical dtypes:
- numeric     -> float64 (missing is NaN, -0.0 becomes 0.0);
- boolean     -> pandas "boolean" (missing is <NA>);
- categorical -> pandas string backed by pyarrow (missing is <NA>);
- datetime    -> datetime64[ns, UTC]; naive timestamps are taken to be UTC already, because a
  file without a zone gives no better guess, and a fixed rule keeps the hash stable.
  Text columns of a file that hold only ISO 8601 dates are read as datetimes before they get
  here (files.py), so "2024-01-05" and "2024-01-05T00:00:00Z" hash alike, and like a Parquet
  timestamp; other date notations stay text, since only a request's declared format says how
  to read them.

Integers beyond 2**53 lose precision as float64; tables of identifiers that large should carry
them as text.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from service.datasets.kinds import ColumnKind, infer_column_kinds, infer_series_kind

STRING_DTYPE = pd.StringDtype(storage="pyarrow")
DATETIME_DTYPE = "datetime64[ns, UTC]"

# Bumped whenever the byte stream below changes, so old and new hashes can never collide.
_STREAM_VERSION = b"foldwise-table-v1\n"
_CANONICAL_NAN = np.frombuffer(bytes.fromhex("000000000000f87f"), dtype="<f8")[0]
_BOOL_MISSING = 2


def canonical_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """Return a copy with str column names, a RangeIndex and one canonical dtype per kind."""
    names = [str(name) for name in frame.columns]
    if len(set(names)) != len(names):
        raise ValueError("column names must be unique once converted to text")
    columns = {}
    for i, name in enumerate(names):
        series = frame.iloc[:, i]
        columns[name] = _canonical_values(series, infer_series_kind(series))
    return pd.DataFrame(columns, index=pd.RangeIndex(len(frame)), columns=names)


def _canonical_values(series: pd.Series, kind: ColumnKind) -> pd.api.extensions.ExtensionArray:
    if kind == "numeric":
        values = series.to_numpy(dtype="float64", na_value=np.nan, copy=True)
        # Adding +0.0 turns -0.0 into 0.0 and leaves every other value, NaN included, unchanged.
        values += 0.0
        return pd.array(values, dtype="float64")
    if kind == "boolean":
        return _canonical_booleans(series)
    if kind == "datetime":
        stamps = (
            series.dt.tz_localize("UTC") if series.dt.tz is None else series.dt.tz_convert("UTC")
        )
        return stamps.astype(DATETIME_DTYPE).array
    return series.astype(STRING_DTYPE).array


def _canonical_booleans(series: pd.Series) -> pd.api.extensions.ExtensionArray:
    missing = series.isna().to_numpy()
    if pd.api.types.is_bool_dtype(series.dtype):
        values = series.to_numpy(dtype=bool, na_value=False)
    else:
        values = (series.astype(str).str.strip().str.lower() == "true").to_numpy(dtype=bool)
    return pd.arrays.BooleanArray(values & ~missing, missing)


def content_hash(frame: pd.DataFrame) -> str:
    """sha256 hex of the table's logical content: names, kinds, row order and values."""
    canonical = canonical_frame(frame)
    return canonical_content_hash(canonical, infer_column_kinds(canonical))


def canonical_content_hash(canonical: pd.DataFrame, kinds: dict[str, ColumnKind]) -> str:
    """`content_hash` of a frame already canonical, with its inferred kinds (no second pass)."""
    digest = hashlib.sha256(_STREAM_VERSION)
    header = json.dumps(
        {"columns": list(kinds), "kinds": list(kinds.values()), "n_rows": len(canonical)},
        ensure_ascii=True,
        separators=(",", ":"),
    ).encode("ascii")
    digest.update(len(header).to_bytes(8, "little"))
    digest.update(header)
    # Every column's segment has a length fixed by the header (strings carry their own lengths
    # first), so the stream is self-delimiting and no two tables share one.
    for i, kind in enumerate(kinds.values()):
        for chunk in _column_bytes(canonical.iloc[:, i], kind):
            digest.update(chunk)
    return digest.hexdigest()


def _column_bytes(series: pd.Series, kind: ColumnKind) -> list[bytes | memoryview]:
    if kind == "numeric":
        values = series.to_numpy(dtype="<f8", na_value=np.nan, copy=True)
        # NaN has many bit patterns; a file format may keep whichever one it was given.
        values[np.isnan(values)] = _CANONICAL_NAN
        return [values.tobytes()]
    missing = series.isna().to_numpy()
    if kind == "boolean":
        codes = series.to_numpy(dtype=np.uint8, na_value=0)
        codes[missing] = _BOOL_MISSING
        return [codes.tobytes()]
    if kind == "datetime":
        ticks = series.to_numpy(dtype="datetime64[ns]").view("<i8").copy()
        ticks[missing] = 0
        return [missing.astype(np.uint8).tobytes(), ticks.tobytes()]
    return _string_bytes(series)


def _string_bytes(series: pd.Series) -> list[bytes | memoryview]:
    """Lengths (int64, -1 for missing) for every row, then the UTF-8 bytes of all present values."""
    array = pa.array(series.array, type=pa.large_string())
    if isinstance(array, pa.ChunkedArray):
        array = array.combine_chunks()
    lengths = pc.binary_length(array).fill_null(-1).to_numpy(zero_copy_only=False)
    filled = array.fill_null("")
    offsets = np.frombuffer(filled.buffers()[1], dtype="<i8")[
        filled.offset : filled.offset + len(filled) + 1
    ]
    data = filled.buffers()[2]
    body = memoryview(data)[offsets[0] : offsets[-1]] if data is not None and len(filled) else b""
    return [lengths.astype("<i8").tobytes(), body]
