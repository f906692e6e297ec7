"""Bad files and bad source objects are refused with one clear sentence naming the field."""

from __future__ import annotations

import gzip
from collections.abc import Callable
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from pydantic import ValidationError

from service.datasets.sources import DatasetSource, load_dataset_file, load_table
from service.errors import BadInput


def _missing(d: Path) -> Path:
    return d / "nowhere.csv"


def _directory(d: Path) -> Path:
    (d / "folder.csv").mkdir()
    return d / "folder.csv"


def _unknown_extension(d: Path) -> Path:
    (d / "table.xlsx").write_bytes(b"PK\x03\x04")
    return d / "table.xlsx"


def _nul_bytes(d: Path) -> Path:
    (d / "junk.csv").write_bytes(bytes(range(256)) * 8)
    return d / "junk.csv"


def _not_utf8(d: Path) -> Path:
    (d / "latin.csv").write_bytes("city,n\nSão Paulo,1\n".encode("latin-1"))
    return d / "latin.csv"


def _empty(d: Path) -> Path:
    (d / "empty.csv").write_bytes(b"")
    return d / "empty.csv"


def _blank_lines(d: Path) -> Path:
    (d / "blank.csv").write_text("\n\n  \n")
    return d / "blank.csv"


def _header_only(d: Path) -> Path:
    (d / "header.csv").write_text("a,b,c\n")
    return d / "header.csv"


def _ragged(d: Path) -> Path:
    (d / "ragged.csv").write_text("a,b\n1,2\n3,4,5\n")
    return d / "ragged.csv"


def _unclosed_quote(d: Path) -> Path:
    (d / "quote.csv").write_text('a,b\n1,"never closed\n')
    return d / "quote.csv"


def _duplicate_csv_header(d: Path) -> Path:
    (d / "dup.csv").write_text("a,b,a\n1,2,3\n")
    return d / "dup.csv"


def _junk_parquet(d: Path) -> Path:
    (d / "junk.parquet").write_bytes(b"this is not parquet at all" * 10)
    return d / "junk.parquet"


def _zero_row_parquet(d: Path) -> Path:
    pd.DataFrame({"a": pd.Series([], dtype=float)}).to_parquet(d / "none.pq")
    return d / "none.pq"


def _duplicate_parquet_columns(d: Path) -> Path:
    table = pa.table([pa.array([1, 2]), pa.array([3, 4])], names=["x", "x"])
    pq.write_table(table, d / "dup.parquet")
    return d / "dup.parquet"


def _nested_parquet(kind: str) -> Callable[[Path], Path]:
    """A Parquet file whose column `readings` is a list, struct or map column."""
    nested = {
        "list": pa.array([[1, 2], [3]]),
        "struct": pa.array([{"lo": 1, "hi": 2}, {"lo": 3, "hi": 4}]),
        "map": pa.array([[("a", 1)], [("b", 2)]], type=pa.map_(pa.string(), pa.int64())),
    }[kind]

    def make(d: Path) -> Path:
        table = pa.table([pa.array([1.0, 2.0]), nested], names=["pressure", "readings"])
        pq.write_table(table, d / f"{kind}.parquet")
        return d / f"{kind}.parquet"

    return make


def _bad_gzip(d: Path) -> Path:
    (d / "bad.csv.gz").write_bytes(b"\x1f\x8b\x08\x00truncated")
    return d / "bad.csv.gz"


def _gzip_of_binary(d: Path) -> Path:
    with gzip.open(d / "bin.csv.gz", "wb") as out:
        out.write(b"\x00\x01\x02" * 100)
    return d / "bin.csv.gz"


# Each bad file and a phrase its message must contain, so the reason given is the right one.
BAD_FILES: dict[str, tuple[Callable[[Path], Path], str]] = {
    "missing file": (_missing, "there is no file"),
    "directory": (_directory, "is a directory"),
    "unknown extension": (_unknown_extension, "extension"),
    "NUL bytes": (_nul_bytes, "binary"),
    "not UTF-8": (_not_utf8, "not UTF-8"),
    "empty file": (_empty, "is empty"),
    "blank lines only": (_blank_lines, "no header row"),
    "header only": (_header_only, "no rows"),
    "ragged rows": (_ragged, "could not be parsed as CSV"),
    "unclosed quote": (_unclosed_quote, "could not be parsed as CSV"),
    "duplicate CSV header": (_duplicate_csv_header, "repeated column names (a)"),
    "junk Parquet": (_junk_parquet, "not a readable Parquet file"),
    "zero-row Parquet": (_zero_row_parquet, "no rows"),
    "duplicate Parquet columns": (_duplicate_parquet_columns, "repeated column names (x)"),
    "list Parquet column": (_nested_parquet("list"), "nested column 'readings' (list<"),
    "struct Parquet column": (_nested_parquet("struct"), "nested column 'readings' (struct<"),
    "map Parquet column": (_nested_parquet("map"), "nested column 'readings' (map<"),
    "bad gzip": (_bad_gzip, "could not be read"),
    "gzipped binary": (_gzip_of_binary, "binary"),
}


@pytest.mark.parametrize("case", list(BAD_FILES), ids=list(BAD_FILES))
def test_bad_file_is_refused(
    case: str, tmp_path: Path, check_bad_input: Callable[[BadInput, str], None]
) -> None:
    make, phrase = BAD_FILES[case]
    path = make(tmp_path)
    with pytest.raises(BadInput) as caught:
        load_table(DatasetSource(path=path.name), base_dir=tmp_path)
    check_bad_input(caught.value, "dataset.path")
    assert phrase in caught.value.message
    # Named once: a second mention would mean one refusal wrapped inside another.
    assert caught.value.message.count(path.name) == 1


@pytest.mark.parametrize("case", ["NUL bytes", "ragged rows", "junk Parquet"])
def test_load_dataset_file_refuses_with_its_own_field(
    case: str, tmp_path: Path, check_bad_input: Callable[[BadInput, str], None]
) -> None:
    path = BAD_FILES[case][0](tmp_path)
    with pytest.raises(BadInput) as caught:
        load_dataset_file(path)
    check_bad_input(caught.value, "path")


def test_field_prefix_is_the_callers(
    tmp_path: Path, check_bad_input: Callable[[BadInput, str], None]
) -> None:
    with pytest.raises(BadInput) as caught:
        load_table(DatasetSource(path="absent.csv"), base_dir=tmp_path, field="jobs.0.dataset")
    check_bad_input(caught.value, "jobs.0.dataset.path")


@pytest.mark.parametrize(
    "body",
    [
        {},
        {"path": "a.csv", "sample": "iris"},
        {"path": ""},
        {"sample": "mnist"},
        {"path": "a.csv", "format": "csv"},
        {"sql": "select 1"},
    ],
    ids=["neither", "both", "empty path", "unknown sample", "extra field", "sql not yet"],
)
def test_source_object_is_validated(body: dict[str, str]) -> None:
    with pytest.raises(ValidationError):
        DatasetSource.model_validate(body)


def test_source_object_accepts_one_of_each() -> None:
    assert DatasetSource.model_validate({"path": "a.csv"}).path == "a.csv"
    assert DatasetSource.model_validate({"sample": "iris"}).sample == "iris"


def test_unusable_paths_are_refused(
    tmp_path: Path, check_bad_input: Callable[[BadInput, str], None]
) -> None:
    (tmp_path / "a.csv").symlink_to(tmp_path / "b.csv")
    (tmp_path / "b.csv").symlink_to(tmp_path / "a.csv")
    for raw in ["a.csv", "bad\x00name.csv", "n" * 5000 + ".csv"]:
        with pytest.raises(BadInput) as caught:
            load_table(DatasetSource(path=raw), base_dir=tmp_path)
        check_bad_input(caught.value, "dataset.path")
