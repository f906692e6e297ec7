"""Dataset sources: where a table's rows come from, and loading them into a canonical table."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

import pandas as pd
import pyarrow as pa
from pydantic import BaseModel, ConfigDict, Field, model_validator

from service.datasets.canonical import canonical_content_hash, canonical_frame
from service.datasets.files import read_dataset_file
from service.datasets.kinds import OVERRIDE_NOTE, ColumnKind, infer_column_kinds, override_hint
from service.datasets.paths import resolve_dataset_path
from service.datasets.sql_source import SqlAccess, SqlSource, read_sql_source
from service.errors import BadInput

SampleName = Literal["breast_cancer", "wine", "iris", "diabetes"]

_SOURCE_FIELDS = ("path", "sample", "sql")


class DatasetSource(BaseModel):
    """Where a dataset's rows come from: exactly one of a file path, a sample or a sql source."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    path: str | None = Field(default=None, min_length=1)
    sample: SampleName | None = None
    sql: SqlSource | None = None

    @model_validator(mode="after")
    def _exactly_one_source(self) -> DatasetSource:
        given = [name for name in _SOURCE_FIELDS if getattr(self, name) is not None]
        if len(given) != 1:
            raise ValueError(
                "a dataset source needs exactly one of 'path', 'sample' or 'sql', "
                f"but {len(given)} were given"
            )
        return self


@dataclass(frozen=True)
class LoadedTable:
    """A canonical frame with its column kinds, content hash and where it came from."""

    frame: pd.DataFrame
    kinds: dict[str, ColumnKind]
    content_hash: str
    origin: dict[str, str]


def load_table(
    source: DatasetSource,
    *,
    base_dir: Path,
    data_roots: tuple[Path, ...] = (),
    field: str = "dataset",
    sql: SqlAccess | None = None,
) -> LoadedTable:
    """Load a source into a canonical table; BadInput names `field` for anything wrong."""
    if source.sql is not None:
        raw, origin = read_sql_source(source.sql, sql or SqlAccess(), field=f"{field}.sql")
        return _loaded(raw, origin, f"{field}.sql")
    if source.sample is not None:
        raw = _sample_frame(source.sample)
        return _loaded(raw, {"sample": source.sample}, f"{field}.sample")
    assert source.path is not None  # guaranteed by the model's one-of rule
    path_field = f"{field}.path"
    path = resolve_dataset_path(
        source.path, base_dir=base_dir, data_roots=data_roots, field=path_field
    )
    raw, fmt = read_dataset_file(path, field=path_field)
    return _loaded(raw, {"path": str(path), "format": fmt}, path_field)


def load_dataset_file(path: Path, *, field: str = "path") -> pd.DataFrame:
    """Read a CSV or Parquet file by extension, as it is stored (not yet canonical)."""
    frame, _ = read_dataset_file(path, field=field)
    return frame


def describe_table(table: LoadedTable) -> dict[str, Any]:
    """JSON-ready summary: hash, shape, per-column kind, missing and distinct counts, origin."""
    frame = table.frame
    columns = [
        {
            "name": name,
            "kind": kind,
            "missing": int(frame[name].isna().sum()),
            "distinct": int(frame[name].nunique(dropna=True)),
            "hint": override_hint(frame[name], kind),
        }
        for name, kind in table.kinds.items()
    ]
    return {
        "content_hash": table.content_hash,
        "n_rows": len(frame),
        "n_columns": frame.shape[1],
        "columns": columns,
        "origin": dict(table.origin),
        "column_types": OVERRIDE_NOTE,
    }


def check_table_size(frame: pd.DataFrame, *, max_rows: int, max_columns: int, field: str) -> None:
    """Refuse a table past the configured row and column caps (FOLDWISE_MAX_ROWS/_COLUMNS)."""
    n_rows, n_columns = frame.shape
    if n_rows > max_rows:
        raise BadInput(
            field,
            f"the table has {n_rows} rows, more than this server accepts ({max_rows}, "
            "FOLDWISE_MAX_ROWS); send a sample of the rows or ask for a higher cap.",
        )
    if n_columns > max_columns:
        raise BadInput(
            field,
            f"the table has {n_columns} columns, more than this server accepts ({max_columns}, "
            "FOLDWISE_MAX_COLUMNS); drop the columns the job does not need.",
        )


def table_from_frame(raw: pd.DataFrame, origin: dict[str, str], *, field: str) -> LoadedTable:
    """Canonicalise a frame read elsewhere (an upload) into a table; BadInput names `field`."""
    return _loaded(raw, origin, field)


def _sample_frame(name: SampleName) -> pd.DataFrame:
    # Imported here: scikit-learn's datasets module is slow to import and most loads are files.
    from sklearn import datasets

    loader = getattr(datasets, f"load_{name}")
    return loader(as_frame=True).frame


def _loaded(raw: pd.DataFrame, origin: dict[str, str], field: str) -> LoadedTable:
    names = [str(name) for name in raw.columns]
    repeated = sorted({name for name in names if names.count(name) > 1})
    if repeated:
        raise BadInput(
            field,
            f"the table has repeated column names ({', '.join(repeated)}); "
            "give every column a unique name.",
        )
    try:
        frame = canonical_frame(raw)
    except (ValueError, TypeError, pa.ArrowException) as exc:
        raise BadInput(
            field,
            f"a column could not be brought to a numeric, text, boolean or timestamp form "
            f"({type(exc).__name__}); store plain values in every cell.",
        ) from None
    # canonicalised and its kinds inferred once: the hash is taken from the same frame
    kinds = infer_column_kinds(frame)
    return LoadedTable(
        frame=frame,
        kinds=kinds,
        content_hash=canonical_content_hash(frame, kinds),
        origin=origin,
    )
