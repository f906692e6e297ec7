"""Loading files into LoadedTable, and the summary `foldwise dataset inspect --json` prints."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

from service.datasets.canonical import content_hash
from service.datasets.kinds import OVERRIDE_NOTE
from service.datasets.sources import DatasetSource, describe_table, load_dataset_file, load_table


def _write(tmp_path: Path) -> Path:
    path = tmp_path / "pumps.csv"
    path.write_text(
        "pump,site,pressure,failed\n"
        "p1,north,1.5,false\n"
        "p2,south,,true\n"
        "p3,north,2.25,\n"
        "p4,,1.5,False\n"
    )
    return path


def test_describe_counts_missing_and_distinct(tmp_path: Path) -> None:
    path = _write(tmp_path)
    table = load_table(DatasetSource(path="pumps.csv"), base_dir=tmp_path)
    summary = describe_table(table)
    assert summary == {
        "content_hash": table.content_hash,
        "n_rows": 4,
        "n_columns": 4,
        "columns": [
            {"name": "pump", "kind": "categorical", "missing": 0, "distinct": 4, "hint": None},
            {"name": "site", "kind": "categorical", "missing": 1, "distinct": 2, "hint": None},
            {"name": "pressure", "kind": "numeric", "missing": 1, "distinct": 2, "hint": None},
            {"name": "failed", "kind": "boolean", "missing": 1, "distinct": 2, "hint": None},
        ],
        "origin": {"path": str(path), "format": "csv"},
        "column_types": OVERRIDE_NOTE,
    }
    assert json.loads(json.dumps(summary)) == summary


def test_loaded_frame_is_canonical(tmp_path: Path) -> None:
    _write(tmp_path)
    table = load_table(DatasetSource(path="pumps.csv"), base_dir=tmp_path)
    assert isinstance(table.frame.index, pd.RangeIndex)
    assert [str(t) for t in table.frame.dtypes] == ["string", "string", "float64", "boolean"]
    assert table.content_hash == content_hash(table.frame)


def test_parquet_origin_and_same_summary(tmp_path: Path) -> None:
    path = _write(tmp_path)
    csv_table = load_table(DatasetSource(path="pumps.csv"), base_dir=tmp_path)
    csv_table.frame.to_parquet(tmp_path / "pumps.pq")
    pq_table = load_table(DatasetSource(path="pumps.pq"), base_dir=tmp_path)
    assert pq_table.origin == {"path": str(path.with_suffix(".pq")), "format": "parquet"}
    pq_summary, csv_summary = describe_table(pq_table), describe_table(csv_table)
    assert pq_summary.pop("origin") != csv_summary.pop("origin")
    assert pq_summary == csv_summary


def test_load_dataset_file_returns_the_stored_types(tmp_path: Path) -> None:
    path = _write(tmp_path)
    frame = load_dataset_file(path)
    assert frame.shape == (4, 4)
    assert frame["pressure"].dtype == np.float64
    assert frame["failed"].tolist()[:2] == [False, True]
