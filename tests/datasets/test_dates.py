"""Dates in tables: ISO 8601 text in CSV is read as instants, with a format-independent hash;
other date texts stay text and carry a hint on how a request declares them."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from service.datasets.canonical import content_hash
from service.datasets.kinds import override_hint
from service.datasets.sources import DatasetSource, LoadedTable, describe_table, load_table

DEMO_CSV = Path(__file__).resolve().parents[2] / "demo_data" / "pump_failures.csv"
# the demo table's content hash as README.md published it before dates were recognised
DEMO_HASH = "ab0c4ce422063549d57ef1d558f79063f7dbffa501ff15607f738097acaf3b8a"


def _load(path: Path) -> LoadedTable:
    return load_table(DatasetSource(path=str(path)), base_dir=path.parent)


def _csv(tmp_path: Path, name: str, dates: list[str]) -> Path:
    path = tmp_path / name
    rows = "".join(f"{d},{i}\n" for i, d in enumerate(dates))
    path.write_text("when,x\n" + rows)
    return path


def test_iso_dates_in_csv_are_datetime(tmp_path: Path) -> None:
    table = _load(_csv(tmp_path, "a.csv", ["2024-01-05", "2024-02-29", ""]))
    assert table.kinds["when"] == "datetime"
    assert str(table.frame["when"].dtype) == "datetime64[ns, UTC]"
    assert table.frame["when"].isna().tolist() == [False, False, True]


def test_the_same_instants_written_several_ways_hash_the_same(tmp_path: Path) -> None:
    spellings = {
        "date.csv": ["2024-01-05", "2024-03-31"],
        "midnight.csv": ["2024-01-05T00:00:00", "2024-03-31T00:00:00"],
        "space.csv": ["2024-01-05 00:00", "2024-03-31 00:00"],
        "zulu.csv": ["2024-01-05T00:00:00Z", "2024-03-31T00:00:00.000Z"],
        "offset.csv": ["2024-01-05T01:00:00+01:00", "2024-03-30T19:00:00-05:00"],
    }
    hashes = {
        name: _load(_csv(tmp_path, name, dates)).content_hash for name, dates in spellings.items()
    }
    # and a Parquet file holding the instants as timestamps
    stamps = pd.to_datetime(["2024-01-05", "2024-03-31"])
    pd.DataFrame({"when": stamps, "x": [0, 1]}).to_parquet(tmp_path / "t.parquet", index=False)
    hashes["parquet"] = _load(tmp_path / "t.parquet").content_hash
    assert len(set(hashes.values())) == 1, hashes


def test_other_instants_hash_differently(tmp_path: Path) -> None:
    first = _load(_csv(tmp_path, "a.csv", ["2024-01-05", "2024-03-31"])).content_hash
    later = _load(_csv(tmp_path, "b.csv", ["2024-01-05", "2024-03-31T00:00:01"])).content_hash
    assert first != later


def test_month_first_dates_stay_text_with_a_hint(tmp_path: Path) -> None:
    table = _load(_csv(tmp_path, "us.csv", ["01/05/2024", "12/31/2023", "02/29/2024"]))
    assert table.kinds["when"] == "categorical"
    hint = describe_table(table)["columns"][0]["hint"]
    assert '"format": "%m/%d/%Y"' in hint


def test_ambiguous_day_month_dates_say_both_formats_fit() -> None:
    hint = override_hint(pd.Series(["01/05/2024", "03/04/2024"]), "categorical")
    assert hint is not None and "%m/%d/%Y" in hint and "%d/%m/%Y" in hint


def test_mixed_text_is_not_a_date(tmp_path: Path) -> None:
    table = _load(_csv(tmp_path, "m.csv", ["2024-01-05", "soon"]))
    assert table.kinds["when"] == "categorical"


def test_tables_without_date_text_keep_their_hash() -> None:
    table = load_table(DatasetSource(path=str(DEMO_CSV)), base_dir=DEMO_CSV.parent)
    assert table.content_hash == DEMO_HASH == content_hash(table.frame)


def test_a_parquet_copy_of_iso_text_hashes_like_the_csv(tmp_path: Path) -> None:
    csv = _csv(tmp_path, "a.csv", ["2024-01-05", "2024-03-31T12:30:00"])
    pd.read_csv(csv).to_parquet(tmp_path / "a.parquet", index=False)  # text, not timestamps
    assert _load(tmp_path / "a.parquet").content_hash == _load(csv).content_hash


def test_a_long_column_is_judged_on_its_distinct_values() -> None:
    # hourly stamps from January 1st: the first 200 rows are days 1-9 only, which fit day-first
    # too, but the whole column does not
    hours = pd.date_range("2000-01-01", periods=2000, freq="h").strftime("%m/%d/%Y")
    hint = override_hint(pd.Series(hours), "categorical")
    assert hint is not None and "%m/%d/%Y" in hint and "%d/%m/%Y" not in hint
