"""The content hash: format-independent, and sensitive to every value, name and order."""

from __future__ import annotations

import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from service.datasets.canonical import canonical_frame, content_hash
from service.datasets.sources import DatasetSource, load_table


def _mixed_frame() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "age": [34, 51, 27, 45],
            "income": [52000.5, np.nan, 31000.25, 0.1],
            "region": ["north", "south", None, "east, coast"],
            "member": [True, False, True, False],
            # CSV cannot tell "" from missing, so "" gets its own test below.
            "note": ['says "hi"', "plain", "line\nbreak", "ünïcødé"],
        }
    )


def _load(path: Path) -> str:
    return load_table(DatasetSource(path=str(path)), base_dir=path.parent).content_hash


def test_csv_and_parquet_give_the_same_hash(tmp_path: Path) -> None:
    frame = _mixed_frame()
    frame.to_csv(tmp_path / "t.csv", index=False)
    frame.to_parquet(tmp_path / "t.parquet", index=False)
    frame.to_csv(tmp_path / "t.csv.gz", index=False)
    hashes = {_load(tmp_path / name) for name in ("t.csv", "t.parquet", "t.csv.gz")}
    assert hashes == {content_hash(frame)}


def test_random_floats_survive_csv_exactly(tmp_path: Path) -> None:
    # Many digits per value, so a parser that rounds even one of them changes the hash.
    rng = np.random.default_rng(7)
    frame = pd.DataFrame({"x": rng.normal(size=2000) * 10.0 ** rng.integers(-8, 8, 2000)})
    frame.to_csv(tmp_path / "f.csv", index=False)
    frame.to_parquet(tmp_path / "f.parquet")
    assert _load(tmp_path / "f.csv") == _load(tmp_path / "f.parquet") == content_hash(frame)


def test_equal_decimals_written_differently_hash_the_same(tmp_path: Path) -> None:
    (tmp_path / "a.csv").write_text("x,y\n1.50,2\n-0.0,3\n")
    (tmp_path / "b.csv").write_text("x,y\n1.5,2.0\n0,3.00\n")
    assert _load(tmp_path / "a.csv") == _load(tmp_path / "b.csv")


def test_int_and_float_columns_with_equal_values_hash_the_same() -> None:
    ints = pd.DataFrame({"x": [1, 2, 3]})
    floats = pd.DataFrame({"x": [1.0, 2.0, 3.0]})
    nullable = pd.DataFrame({"x": pd.array([1, 2, 3], dtype="Int64")})
    assert content_hash(ints) == content_hash(floats) == content_hash(nullable)


def test_every_nan_bit_pattern_hashes_the_same() -> None:
    quiet = np.frombuffer(bytes.fromhex("000000000000f87f"), dtype="<f8")
    payload = np.frombuffer(bytes.fromhex("010000000000f8ff"), dtype="<f8")
    assert np.isnan(quiet[0]) and np.isnan(payload[0])
    first = pd.DataFrame({"x": [1.0, quiet[0]]})
    second = pd.DataFrame({"x": [1.0, payload[0]]})
    assert content_hash(first) == content_hash(second)


def test_categorical_and_plain_strings_hash_the_same() -> None:
    plain = pd.DataFrame({"c": ["a", None, "b"]})
    categorical = pd.DataFrame({"c": pd.Categorical(["a", None, "b"])})
    assert content_hash(plain) == content_hash(categorical)


def test_index_does_not_enter_the_hash() -> None:
    frame = _mixed_frame()
    assert content_hash(frame.set_axis([10, 11, 12, 13])) == content_hash(frame)


def test_sample_round_tripped_through_csv_keeps_its_hash(tmp_path: Path) -> None:
    # The wine table ships with scikit-learn (sklearn.datasets.load_wine).
    sample = load_table(DatasetSource(sample="wine"), base_dir=tmp_path)
    # pandas writes floats with their shortest repr, which parses back to the same double.
    sample.frame.to_csv(tmp_path / "wine.csv", index=False)
    assert _load(tmp_path / "wine.csv") == sample.content_hash


def _change_cell(f: pd.DataFrame) -> pd.DataFrame:
    f.loc[2, "age"] = 28
    return f


def _rename(f: pd.DataFrame) -> pd.DataFrame:
    return f.rename(columns={"age": "age_years"})


def _swap_rows(f: pd.DataFrame) -> pd.DataFrame:
    return f.iloc[[1, 0, 2, 3]].reset_index(drop=True)


def _swap_columns(f: pd.DataFrame) -> pd.DataFrame:
    return f[["income", "age", "region", "member", "note"]]


def _number_to_missing(f: pd.DataFrame) -> pd.DataFrame:
    f["income"] = f["income"].astype(float)
    f.loc[0, "income"] = np.nan
    return f


def _text_to_missing(f: pd.DataFrame) -> pd.DataFrame:
    f["note"] = f["note"].astype(object)
    f.loc[1, "note"] = None
    return f


def _bool_to_missing(f: pd.DataFrame) -> pd.DataFrame:
    f["member"] = f["member"].astype("boolean")
    f.loc[1, "member"] = pd.NA
    return f


def _bool_flipped(f: pd.DataFrame) -> pd.DataFrame:
    f.loc[0, "member"] = False
    return f


def _text_as_category(f: pd.DataFrame) -> pd.DataFrame:
    # Same digits, other kind: "34" as text is not the number 34.
    f["age"] = f["age"].astype(str)
    return f


def _drop_last_row(f: pd.DataFrame) -> pd.DataFrame:
    return f.iloc[:-1]


def _move_text_between_cells(f: pd.DataFrame) -> pd.DataFrame:
    # "ab","" vs "a","b": concatenated bytes agree, so only the length prefixes tell them apart.
    f["note"] = ["ab", "", "x", "y"]
    return f


MUTATIONS: dict[str, Callable[[pd.DataFrame], pd.DataFrame]] = {
    "changed cell": _change_cell,
    "renamed column": _rename,
    "swapped rows": _swap_rows,
    "swapped columns": _swap_columns,
    "number to missing": _number_to_missing,
    "text to missing": _text_to_missing,
    "boolean to missing": _bool_to_missing,
    "boolean flipped": _bool_flipped,
    "numbers as text": _text_as_category,
    "dropped row": _drop_last_row,
}


@pytest.mark.parametrize("mutation", list(MUTATIONS), ids=list(MUTATIONS))
def test_any_change_gives_a_new_hash(mutation: str) -> None:
    base = _mixed_frame()
    changed = MUTATIONS[mutation](base.copy())
    assert content_hash(changed) != content_hash(base)


def test_all_mutations_give_distinct_hashes() -> None:
    hashes = [content_hash(m(_mixed_frame())) for m in MUTATIONS.values()]
    hashes.append(content_hash(_mixed_frame()))
    assert len(set(hashes)) == len(hashes)


def test_length_prefixes_separate_strings() -> None:
    first = pd.DataFrame({"s": ["ab", ""]})
    second = pd.DataFrame({"s": ["a", "b"]})
    assert content_hash(first) != content_hash(second)
    assert content_hash(_move_text_between_cells(_mixed_frame())) != content_hash(_mixed_frame())


def test_empty_text_is_not_missing() -> None:
    # The stream gives missing its own marker, so it cannot collide with a zero-length string.
    assert content_hash(pd.DataFrame({"s": ["", "a"]})) != content_hash(
        pd.DataFrame({"s": [None, "a"]})
    )


def test_canonical_frame_types_and_index() -> None:
    frame = pd.DataFrame(
        {
            0: [3, -0.0],
            "flag": ["true", "False"],
            "city": pd.Categorical(["x", None]),
            "at": pd.to_datetime(["2024-05-01 12:00", None]),
        },
        index=[7, 9],
    )
    canonical = canonical_frame(frame)
    assert list(canonical.columns) == ["0", "flag", "city", "at"]
    assert isinstance(canonical.index, pd.RangeIndex)
    assert [str(t) for t in canonical.dtypes] == [
        "float64",
        "boolean",
        "string",
        "datetime64[ns, UTC]",
    ]
    assert np.signbit(canonical["0"].to_numpy()).tolist() == [False, False]
    assert canonical["flag"].tolist() == [True, False]
    assert canonical["city"].isna().tolist() == [False, True]


def test_naive_timestamps_are_read_as_utc() -> None:
    naive = pd.DataFrame({"at": pd.to_datetime(["2024-05-01 12:00"])})
    aware = pd.DataFrame({"at": pd.to_datetime(["2024-05-01 14:00"]).tz_localize("Europe/Oslo")})
    assert content_hash(naive) == content_hash(aware)


def test_hash_of_a_wide_table_is_fast() -> None:
    rng = np.random.default_rng(0)
    frame = pd.DataFrame({f"x{i}": rng.normal(size=100_000) for i in range(16)})
    for i in range(4):
        frame[f"s{i}"] = rng.choice(
            np.array(["low", "mid", "high", None], dtype=object), size=100_000
        )
    start = time.perf_counter()
    digest = content_hash(frame)
    elapsed = time.perf_counter() - start
    assert len(digest) == 64 and int(digest, 16) >= 0
    # Generous bound for slow CI machines; on a laptop this takes about a tenth of a second.
    assert elapsed < 3.0
