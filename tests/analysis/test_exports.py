"""Exports round-trip: CSV and Parquet read back with pandas equal the JSON listing."""

from __future__ import annotations

import io
import json
import math
from typing import Any

import pandas as pd
import pyarrow.parquet as pq
import pytest

from service.analysis import export, queries
from service.auth import Principal
from service.jobs.handover.fold_rows import EXTRA_COLUMNS

from .conftest import Seeded


def _listing(seeded: Seeded, path: str, **params: Any) -> list[dict[str, Any]]:
    rows: list[dict[str, Any]] = []
    after = 0
    with seeded.server.client(seeded.lab) as client:
        while True:
            page = client.get(path, params={"after": after, "limit": 50, **params}).json()
            rows += page["data"]
            if page["next_after"] is None:
                return rows
            after = page["next_after"]


def _plain(value: Any, column: str) -> Any:
    """One cell as comparable Python, whichever reader produced it."""
    if column == "versions":
        return value if isinstance(value, dict) else json.loads(value)
    if column == "created_at":
        return pd.Timestamp(value).tz_convert("UTC") if pd.Timestamp(value).tzinfo else value
    if column == "seed":
        return (
            None
            if value is None or (isinstance(value, float) and math.isnan(value))
            else int(value)
        )
    if hasattr(value, "item"):
        return value.item()  # numpy scalar
    return value


def _records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    assert list(frame.columns) == list(export.COLUMNS)
    return [{c: _plain(v, c) for c, v in row.items()} for row in frame.to_dict(orient="records")]


def _json_records(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    return [{c: _plain(row[c], c) for c in export.COLUMNS} for row in rows]


def _get_bytes(seeded: Seeded, path: str, **params: Any) -> tuple[bytes, str]:
    with seeded.server.client(seeded.lab) as client:
        answer = client.get(path, params=params)
    assert answer.status_code == 200, answer.text
    return answer.content, answer.headers["content-type"]


@pytest.mark.parametrize("params", [{}, {"role": "outer", "metric": "balanced_accuracy"}])
def test_dataset_csv_and_parquet_equal_the_json_listing(
    seeded: Seeded, params: dict[str, str]
) -> None:
    iris = seeded.jobs["A"]["dataset_hash"]
    base = f"/v1/datasets/{iris}/fold-scores"
    listing = _json_records(_listing(seeded, base, **params))
    assert listing
    csv_bytes, csv_type = _get_bytes(seeded, base + ".csv", **params)
    assert csv_type.startswith("text/csv")
    from_csv = _records(pd.read_csv(io.BytesIO(csv_bytes), keep_default_na=True))
    assert from_csv == listing
    parquet_bytes, parquet_type = _get_bytes(seeded, base + ".parquet", **params)
    assert parquet_type == "application/vnd.apache.parquet"
    assert _records(pd.read_parquet(io.BytesIO(parquet_bytes))) == listing


def test_job_parquet_equals_the_job_listing(seeded: Seeded) -> None:
    job_id = seeded.jobs["B"]["id"]
    rows = _listing(seeded, f"/v1/jobs/{job_id}/fold-scores")
    content, _ = _get_bytes(seeded, f"/v1/jobs/{job_id}/fold-scores.parquet")
    frame = pd.read_parquet(io.BytesIO(content))
    # a job's export adds where each fold sits and its candidate (jobs/handover/fold_rows.py)
    assert list(frame.columns) == export.JOB_PARQUET_SCHEMA.names
    assert _records(frame[list(export.COLUMNS)]) == _json_records(rows)
    extra = frame[list(EXTRA_COLUMNS)].astype(object).where(frame.notna(), None)
    expected = [
        {**{c: row[c] for c in EXTRA_COLUMNS}, "params": json.dumps(row["params"], sort_keys=True)}
        for row in rows
    ]
    assert [{c: _plain(v, c) for c, v in r.items()} for r in extra.to_dict("records")] == expected
    assert {row["role"] for row in rows} == {"outer", "inner", "final_inner"}


def test_parquet_is_written_one_row_group_per_page(
    seeded: Seeded, monkeypatch: pytest.MonkeyPatch
) -> None:
    """With pages of 7 the stream carries ceil(n / 7) row groups and still reads back whole."""
    monkeypatch.setattr(export, "PAGE", 7)
    iris = seeded.jobs["A"]["dataset_hash"]
    lab = Principal("lab", frozenset({"read"}))

    def fetch(session: Any, after: int, limit: int) -> list[Any]:
        return queries.dataset_fold_scores_page(session, lab, iris, after_id=after, limit=limit)

    chunks = list(export.parquet_chunks(seeded.server.sessions, fetch, lab))
    listing = _json_records(_listing(seeded, f"/v1/datasets/{iris}/fold-scores"))
    parquet = pq.ParquetFile(io.BytesIO(b"".join(chunks)))
    assert parquet.metadata.num_row_groups == math.ceil(len(listing) / 7)
    # one chunk per row group as it is written, then the footer: nothing waits for the end
    assert len(chunks) == parquet.metadata.num_row_groups + 1
    assert _records(parquet.read().to_pandas()) == listing


def test_other_teams_cannot_export_the_dataset(seeded: Seeded) -> None:
    iris = seeded.jobs["A"]["dataset_hash"]
    with seeded.server.client(seeded.other) as client:
        for suffix in (".csv", ".parquet", ""):
            answer = client.get(f"/v1/datasets/{iris}/fold-scores{suffix}")
            assert answer.status_code == 404, suffix
