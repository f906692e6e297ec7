"""The content-addressed dataset store that workers read by hash."""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd
import pytest

from service.datasets.canonical import canonical_frame, content_hash
from service.datasets.sources import DatasetSource, load_table
from service.datasets.store import read_table, read_table_cached, save_table


def _table() -> pd.DataFrame:
    return canonical_frame(
        pd.DataFrame(
            {
                "x": [1.5, None, -2.0],
                "flag": [True, None, False],
                "city": ["Oslo", None, "Lima"],
                "at": pd.to_datetime(
                    ["2024-01-01", None, "2024-03-01T10:30:00"], format="ISO8601"
                ).tz_localize("UTC"),
            }
        )
    )


def test_round_trip_keeps_frame_and_hash(tmp_path: Path) -> None:
    frame = _table()
    digest = content_hash(frame)
    path = save_table(frame, digest, tmp_path / "store")
    assert path == tmp_path / "store" / f"{digest}.parquet"
    back = read_table(digest, tmp_path / "store")
    pd.testing.assert_frame_equal(back, frame, check_exact=True)
    assert content_hash(back) == digest


def test_sample_round_trip_keeps_hash(tmp_path: Path) -> None:
    table = load_table(DatasetSource(sample="breast_cancer"), base_dir=tmp_path)
    save_table(table.frame, table.content_hash, tmp_path)
    assert content_hash(read_table(table.content_hash, tmp_path)) == table.content_hash


def test_saving_twice_leaves_the_first_file(tmp_path: Path) -> None:
    frame = _table()
    digest = content_hash(frame)
    path = save_table(frame, digest, tmp_path)
    os.utime(path, (1_000_000, 1_000_000))
    assert save_table(frame, digest, tmp_path) == path
    assert path.stat().st_mtime == 1_000_000
    # Only the table itself: no temporary file is left behind.
    assert [p.name for p in tmp_path.iterdir()] == [path.name]


def test_missing_hash_is_a_lookup_error(tmp_path: Path) -> None:
    with pytest.raises(LookupError, match="not in the dataset store"):
        read_table("0" * 64, tmp_path)


@pytest.mark.parametrize("bad", ["../etc/passwd", "ABC", "0" * 63, "g" * 64])
def test_only_hex_digests_name_files(bad: str, tmp_path: Path) -> None:
    with pytest.raises(ValueError, match="not a sha256 hex digest"):
        save_table(_table(), bad, tmp_path)


def test_cached_read_returns_the_same_frame(tmp_path: Path) -> None:
    frame = _table()
    digest = content_hash(frame)
    save_table(frame, digest, tmp_path)
    first = read_table_cached(digest, tmp_path)
    assert read_table_cached(digest, tmp_path) is first
    assert content_hash(first) == digest


def test_cached_read_does_not_remember_absence(tmp_path: Path) -> None:
    frame = _table()
    digest = content_hash(frame)
    with pytest.raises(LookupError):
        read_table_cached(digest, tmp_path)
    save_table(frame, digest, tmp_path)
    assert content_hash(read_table_cached(digest, tmp_path)) == digest
