"""Fold scores as streamed CSV or Parquet, read from the store one keyset page at a time.

Nothing loads a whole table: each page is read in its own short session (on SQLite a transaction
holds the write lock, and a client may read slowly), turned into CSV lines or one Parquet row
group, and handed on before the next page is read.
"""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Callable, Iterator
from datetime import datetime
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq
from pydantic import TypeAdapter
from sqlalchemy.orm import Session, sessionmaker

from service.auth import Principal
from service.jobs.handover.fold_rows import EXTRA_COLUMNS, FoldContext
from service.jobs.queries.jobs import foreign_job_ids
from service.store.models import FoldScore

PAGE = 1000

PARQUET_SCHEMA = pa.schema(
    [
        ("id", pa.int64()),
        ("fold_fingerprint", pa.string()),
        ("candidate_key", pa.string()),
        ("metric", pa.string()),
        ("value", pa.float64()),
        ("fit_seconds", pa.float64()),
        ("score_seconds", pa.float64()),
        ("n_train", pa.int64()),
        ("n_test", pa.int64()),
        ("seed", pa.int64()),
        ("versions", pa.string()),  # a JSON object, as in the CSV
        ("worker", pa.string()),
        ("job_id", pa.string()),
        ("created_at", pa.timestamp("us", tz="UTC")),
    ]
)

# a job's own exports add where each fold sits in its plan and the candidate (jobs/fold_rows.py)
JOB_PARQUET_SCHEMA = pa.schema(
    [
        *PARQUET_SCHEMA,
        *zip(
            EXTRA_COLUMNS,
            # role, repeat, fold, inner_repeat, inner_fold, estimator, params (a JSON object),
            # interval_part (a nested interval's procedure folds only), halving_round (a
            # halving search's round folds only)
            (pa.string(), *[pa.int64()] * 4, pa.string(), pa.string(), pa.int64(), pa.int64()),
            strict=True,
        ),
    ]
)
# The one column list of every fold-score export, in the JSON listing's order (FoldScorePublic
# in the API schemas): a dataset's stored columns, and a job's with its extra columns.
COLUMNS = tuple(PARQUET_SCHEMA.names)
JOB_COLUMNS = tuple(JOB_PARQUET_SCHEMA.names)

# fetch(session, after_id, limit) -> the next page of scores in id order
PageFetcher = Callable[[Session, int, int], list[FoldScore]]


def score_row(score: FoldScore, hidden: frozenset[str] = frozenset()) -> dict[str, Any]:
    """One score as a flat row: versions as sorted JSON text, created_at as an aware datetime
    (job_id empty when another team's job, one of `hidden`, computed it)."""
    return {
        "id": score.id,
        "fold_fingerprint": score.fold_fingerprint,
        "candidate_key": score.candidate_key,
        "metric": score.metric,
        "value": score.value,
        "fit_seconds": score.fit_seconds,
        "score_seconds": score.score_seconds,
        "n_train": score.n_train,
        "n_test": score.n_test,
        "seed": score.seed,
        "versions": json.dumps(score.versions, sort_keys=True),
        "worker": score.worker,
        "job_id": None if score.job_id in hidden else score.job_id,
        "created_at": score.created_at,
    }


def score_pages(
    sessions: sessionmaker[Session],
    fetch: PageFetcher,
    principal: Principal,
    context: FoldContext | None = None,
) -> Iterator[list[dict]]:
    """Pages of flat rows, each read in its own session, until a short page ends the keyset."""
    after = 0
    while True:
        with sessions() as session:
            page = fetch(session, after, PAGE)
            hidden = frozenset(foreign_job_ids(session, principal, {s.job_id for s in page}))
            rows = [score_row(s, hidden) for s in page]
            if context is not None:
                for row, score in zip(rows, page, strict=True):
                    row.update(context.flat_extra(score.fold_fingerprint, score.candidate_key))
        if rows:
            yield rows
        if len(page) < PAGE:
            return
        after = page[-1].id


_DATETIME = TypeAdapter(datetime)


def _csv_cell(value: Any) -> Any:
    # ISO 8601 written as the JSON listing writes it, so a cell equals the listing's string
    return _DATETIME.dump_python(value, mode="json") if isinstance(value, datetime) else value


def csv_chunks(
    sessions: sessionmaker[Session],
    fetch: PageFetcher,
    principal: Principal,
    context: FoldContext | None = None,
) -> Iterator[str]:
    """The header, then one chunk of CSV lines per page: the one CSV writer of fold scores.

    With a job's `context`, each row also says where its fold sits and which candidate it is.
    """
    columns = COLUMNS if context is None else JOB_COLUMNS
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(columns)
    yield buffer.getvalue()
    for rows in score_pages(sessions, fetch, principal, context):
        buffer.seek(0)
        buffer.truncate()
        for row in rows:
            writer.writerow([_csv_cell(row[c]) for c in columns])
        yield buffer.getvalue()


class _Drain(io.RawIOBase):
    """A write-only sink that hands over what was written since the last take()."""

    def __init__(self) -> None:
        super().__init__()
        self._chunks: list[bytes] = []
        self._position = 0

    def writable(self) -> bool:
        return True

    def write(self, data: Any) -> int:
        chunk = bytes(data)
        self._chunks.append(chunk)
        self._position += len(chunk)
        return len(chunk)

    def tell(self) -> int:
        return self._position

    def take(self) -> bytes:
        out = b"".join(self._chunks)
        self._chunks.clear()
        return out


def parquet_chunks(
    sessions: sessionmaker[Session],
    fetch: PageFetcher,
    principal: Principal,
    context: FoldContext | None = None,
) -> Iterator[bytes]:
    """A Parquet file streamed as it is written: one row group per page, the footer last.

    With a job's `context`, each row also says where its fold sits and which candidate it is.
    """
    schema = PARQUET_SCHEMA if context is None else JOB_PARQUET_SCHEMA
    # Parquet is written front to back (magic, row groups, then the footer with their offsets),
    # so ParquetWriter needs no seek: each page's row group is sent as soon as it is written,
    # with no temporary file and never more than one page in memory.
    drain = _Drain()
    writer = pq.ParquetWriter(drain, schema)
    try:
        for rows in score_pages(sessions, fetch, principal, context):
            writer.write_table(pa.Table.from_pylist(rows, schema=schema))
            yield drain.take()
    finally:
        writer.close()
    yield drain.take()
