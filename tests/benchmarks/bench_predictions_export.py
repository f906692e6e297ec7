"""Measure streaming a job's out-of-fold predictions: peak Python memory against output size.

Run: .venv/bin/python tests/benchmarks/bench_predictions_export.py [N_ROWS ...]
A script, not a test. For each size (default 25000 and 100000 rows) it runs one small real job
in a fresh embedded store (scikit-learn's make_classification table, LogisticRegression with
preprocess "none", 5 outer x 2 inner folds), loads the job's plan (the table itself, which any
export needs), then streams the CSV and Parquet exports through the functions the API serves
them with, with tracemalloc tracking the peak above that baseline. Flat memory means the peak
stays near one page (PAGE rows) plus one outer fold's stored arrays while the output grows
with the rows.
"""

from __future__ import annotations

import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq
from sklearn.datasets import make_classification

from service.analysis import predictions
from service.config import load_settings
from service.jobs.execution.plans import plan_for_job
from service.jobs.local.driver import run_embedded
from service.store.db import make_engine, make_session_factory
from service.store.models import Job


def _job(n_rows: int, folder: Path) -> tuple[str, object]:
    X, y = make_classification(n_samples=n_rows, n_features=8, n_informative=4, random_state=0)
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(X.shape[1])])
    frame["target"] = y
    frame.to_parquet(folder / "table.parquet")
    request = {
        "dataset": {"path": "table.parquet"},
        "target": "target",
        "task": "classification",
        "families": [{"estimator": "LogisticRegression", "fixed": {"max_iter": 1000}}],
        "preprocess": "none",
        "outer": {"method": "stratified_kfold", "k": 5, "seed": 0},
        "inner": {"method": "stratified_kfold", "k": 2, "seed": 1},
        "metrics": ["accuracy", "neg_log_loss"],
    }
    settings = load_settings({"FOLDWISE_HOME": str(folder / "home")})
    outcome = run_embedded(request, settings=settings, workers=1, base_dir=folder)
    return outcome.job_id, settings


def _measure(label: str, chunks_of: object, sink: Path) -> tuple[int, int, float]:
    """Stream every chunk to a file (so kept output is not counted) under tracemalloc."""
    tracemalloc.start()
    tracemalloc.reset_peak()
    started = time.perf_counter()
    size = 0
    with sink.open("wb") as out:
        for chunk in chunks_of:  # type: ignore[attr-defined]
            data = chunk.encode() if isinstance(chunk, str) else chunk
            size += len(data)
            out.write(data)
    seconds = time.perf_counter() - started
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    if label == "parquet":
        print(f"    parquet file holds {pq.read_metadata(sink).num_rows} rows")
    return size, peak, seconds


def main(sizes: list[int]) -> None:
    """Run each size and print output bytes, peak memory and time per format."""
    print(f"page = {predictions.PAGE} rows")
    for n_rows in sizes:
        with tempfile.TemporaryDirectory() as tmp:
            folder = Path(tmp)
            started = time.perf_counter()
            job_id, settings = _job(n_rows, folder)
            print(f"{n_rows} rows: job ran in {time.perf_counter() - started:.1f} s")
            engine = make_engine(settings.database_url)  # type: ignore[attr-defined]
            sessions = make_session_factory(engine)
            with sessions() as session:
                job = session.get_one(Job, job_id)
                loaded = plan_for_job(session, job_id, settings)  # type: ignore[arg-type]
                table = predictions.prediction_table(session, loaded, job.result or {})
            for label, make in (
                ("csv", predictions.csv_chunks),
                ("parquet", predictions.parquet_chunks),
            ):
                size, peak, seconds = _measure(label, make(sessions, table), folder / label)
                print(
                    f"  {label:7s}: {size / 1e6:7.2f} MB out, peak {peak / 1e6:6.2f} MB traced, "
                    f"{seconds:.2f} s ({n_rows / seconds:,.0f} rows/s)"
                )
            engine.dispose()


if __name__ == "__main__":
    main([int(a) for a in sys.argv[1:]] or [25_000, 100_000])
