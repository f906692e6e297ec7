"""A job's out-of-fold predictions as rows: JSON pages, streamed CSV and streamed Parquet.

One row per row of every outer test fold: the row's index in the table, repeat and fold, the
picked candidate's key, the actual and predicted value and, where the pick offered them, class
probabilities (`proba_<class>`) and decision values (`decision`, or `decision_<class>` for more
than two classes). Rows come in result v1's outer order, each fold's rows in the fold's order.

Streaming reads one outer fold at a time in its own short session and hands it on in pages of
PAGE rows, so memory is bounded by one fold's arrays and one page, whatever the job's size.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
from sqlalchemy.orm import Session, sessionmaker

from service.analysis.export import _Drain
from service.cv.slices import OuterPredictions
from service.jobs.execution.plans import LoadedPlan
from service.jobs.handover.outer_predictions import each_outer, read_outer
from service.store.models import FoldPrediction

PAGE = 5000
MAX_PAGE = 5000
BASE_COLUMNS = ("row", "repeat", "fold", "candidate_key", "actual", "predicted")


@dataclass(frozen=True)
class PredictionTable:
    """The columns of one job's prediction rows and how to fill them."""

    loaded: LoadedPlan
    result: dict[str, Any]
    classes: list[Any]  # every class of the target, in sorted order (classification)
    proba: bool
    decision: bool

    @property
    def columns(self) -> list[str]:
        """Column names in output order."""
        out = list(BASE_COLUMNS)
        if self.proba:
            out += [f"proba_{c}" for c in self.classes]
        if self.decision:
            out += (
                ["decision"] if len(self.classes) == 2 else [f"decision_{c}" for c in self.classes]
            )
        return out

    def arrow_schema(self) -> pa.Schema:
        """The Parquet schema: labels keep the target's type."""
        y = self.loaded.plan.y
        if y.dtype == np.bool_:
            label = pa.bool_()
        elif np.issubdtype(y.dtype, np.integer):
            label = pa.int64()
        elif np.issubdtype(y.dtype, np.floating):
            label = pa.float64()
        else:
            label = pa.string()
        fields = [
            ("row", pa.int64()),
            ("repeat", pa.int64()),
            ("fold", pa.int64()),
            ("candidate_key", pa.string()),
            ("actual", label),
            ("predicted", label),
        ]
        fields += [(name, pa.float64()) for name in self.columns[len(BASE_COLUMNS) :]]
        return pa.schema(fields)


def prediction_table(
    session: Session, loaded: LoadedPlan, result: dict[str, Any]
) -> PredictionTable:
    """Which columns this job's predictions have (read from the kept kinds, not the arrays)."""
    task = loaded.plan.spec.task
    if task == "regression":
        return PredictionTable(loaded, result, [], False, False)
    classes = np.unique(loaded.plan.y).tolist()
    proba = decision = False
    fingerprints = {(f.repeat, f.index): f.fingerprint for f in loaded.plan.outer}
    for row in result["outer"]:
        key = (loaded.dataset_hash, fingerprints[(row["repeat"], row["fold"])])
        stored = session.get(FoldPrediction, (*key, row["pick"]["candidate_key"]))
        if stored is not None:
            # the kind names the richest response kept; decode only to see both when needed
            arrays = (
                read_outer(session, loaded, row).stored.arrays if stored.kind != "label" else {}
            )
            proba = proba or "predict_proba" in arrays
            decision = decision or "decision_function" in arrays
    return PredictionTable(loaded, result, classes, proba, decision)


def _fold_columns(
    table: PredictionTable, part: OuterPredictions, start: int, stop: int
) -> list[list[Any]]:
    """Column-wise values of rows [start, stop) of one fold, as plain Python values."""
    rows = part.rows[start:stop]
    n = len(rows)
    y = table.loaded.plan.y[rows]
    arrays = {name: values[start:stop] for name, values in part.stored.arrays.items()}
    if part.stored.classes is None:  # regression
        predicted = arrays["predict"].tolist()
    else:
        fold_classes = np.asarray(part.stored.classes, dtype=object)
        predicted = fold_classes[arrays["predict"].astype(np.int64)].tolist()
    columns: list[list[Any]] = [
        rows.tolist(),
        [part.repeat] * n,
        [part.fold] * n,
        [part.candidate_key] * n,
        y.tolist(),
        predicted,
    ]
    fold_classes_list = part.stored.classes or []
    if table.proba:
        proba = arrays.get("predict_proba")
        for label in table.classes:
            if proba is None or label not in fold_classes_list:
                columns.append([None] * n)  # this fold's pick gave no probability for it
            else:
                columns.append(proba[:, fold_classes_list.index(label)].tolist())
    if table.decision:
        values = arrays.get("decision_function")
        if len(table.classes) == 2:
            columns.append([None] * n if values is None else values.reshape(n).tolist())
        else:
            for label in table.classes:
                if values is None or label not in fold_classes_list:
                    columns.append([None] * n)
                else:
                    columns.append(values[:, fold_classes_list.index(label)].tolist())
    return columns


def _pages(table: PredictionTable, parts: Iterator[OuterPredictions]) -> Iterator[list[list[Any]]]:
    """Column-wise pages of at most PAGE rows (only one page is ever turned into objects)."""
    for part in parts:
        for start in range(0, len(part.rows), PAGE):
            yield _fold_columns(table, part, start, start + PAGE)


def json_page(
    session: Session, table: PredictionTable, *, after: int, limit: int
) -> tuple[list[dict[str, Any]], int | None]:
    """Rows after the first `after` (a count of rows already read), and the next cursor."""
    names = table.columns
    rows: list[dict[str, Any]] = []
    start = 0  # ordinal of the first row of the current fold
    for outer_row in table.result["outer"]:
        size = int(outer_row["n_test"])
        if start + size <= after:
            start += size
            continue  # wholly read already: not decoded
        part = read_outer(session, table.loaded, outer_row)
        first = max(0, after - start)
        last = min(size, first + limit - len(rows))
        columns = _fold_columns(table, part, first, last)
        rows += [dict(zip(names, values, strict=True)) for values in zip(*columns, strict=True)]
        start += size
        if len(rows) == limit:
            break
    total = sum(int(r["n_test"]) for r in table.result["outer"])
    end = after + len(rows)
    return rows, (end if end < total else None)


def csv_chunks(sessions: sessionmaker[Session], table: PredictionTable) -> Iterator[str]:
    """The header, then one chunk of CSV lines per page."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(table.columns)
    yield buffer.getvalue()
    for page in _pages(table, each_outer(sessions, table.loaded, table.result)):
        buffer.seek(0)
        buffer.truncate()
        writer.writerows(zip(*page, strict=True))
        yield buffer.getvalue()


def parquet_chunks(sessions: sessionmaker[Session], table: PredictionTable) -> Iterator[bytes]:
    """A Parquet file streamed as written: one row group per page, the footer last."""
    schema = table.arrow_schema()
    drain = _Drain()
    writer = pq.ParquetWriter(drain, schema)
    try:
        for page in _pages(table, each_outer(sessions, table.loaded, table.result)):
            arrays = [
                pa.array(col, type=field.type) for col, field in zip(page, schema, strict=True)
            ]
            writer.write_table(pa.Table.from_arrays(arrays, schema=schema))
            yield drain.take()
    finally:
        writer.close()
    yield drain.take()
