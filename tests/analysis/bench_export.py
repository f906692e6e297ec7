"""Measure the streamed exports on PostgreSQL: rows per second and peak Python memory.

Run: .venv/bin/python tests/analysis/bench_export.py [N_ROWS] [--explain]
A script, not a test: it fills a fresh database with synthetic fold scores (one job, 50
candidates x 100 folds x N/5000 metrics), then streams the dataset's CSV and Parquet exports
through the same functions the API uses, with tracemalloc tracking the peak.
"""

from __future__ import annotations

import hashlib
import io
import sys
import time
import tracemalloc
import uuid

import psycopg
import pyarrow.parquet as pq
from sqlalchemy import insert

from service.analysis import export, queries
from service.auth import Principal
from service.store.db import make_engine, make_session_factory, upgrade_database, utcnow
from service.store.models import Candidate, Dataset, FoldScore, Job, JobCandidate, JobFold
from service.store.models import Fold as FoldRow

ADMIN = "host=127.0.0.1 port=5432 user=postgres dbname=postgres"


def _h(text: str) -> str:
    return hashlib.sha256(text.encode()).hexdigest()


def main(n_rows: int) -> None:
    """Fill, export both ways, print the figures."""
    name = f"foldwise_bench_{uuid.uuid4().hex[:8]}"
    with psycopg.connect(ADMIN, autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    url = f"postgresql+psycopg://postgres@127.0.0.1:5432/{name}"
    try:
        upgrade_database(url)
        engine = make_engine(url)
        sessions = make_session_factory(engine)
        dataset, job_id = _h("bench"), uuid.uuid4().hex
        candidates = [_h(f"c{i}") for i in range(50)]
        folds = [_h(f"f{i}") for i in range(100)]
        metrics = [f"m{i}" for i in range(max(1, n_rows // 5000))]
        with sessions.begin() as s:
            s.add(Dataset(content_hash=dataset, n_rows=1, n_columns=1, columns=[], origin={}))
            s.flush()
            s.add(Job(id=job_id, dataset_hash=dataset, status="succeeded", request={}, team="b"))
            s.add_all(
                Candidate(candidate_key=k, estimator="X", params={}, preprocess="auto")
                for k in candidates
            )
            s.add_all(
                FoldRow(
                    fingerprint=f,
                    dataset_hash=dataset,
                    n_train=90,
                    n_test=10,
                    train_mask=b"",
                    test_mask=b"",
                    versions={},
                )
                for f in folds
            )
            s.flush()
            s.add_all(
                JobCandidate(job_id=job_id, position=i, candidate_key=k)
                for i, k in enumerate(candidates)
            )
            s.add_all(
                JobFold(
                    job_id=job_id,
                    role="outer",
                    scope="all",
                    repeat=i // 10,
                    fold_index=i % 10,
                    fingerprint=f,
                )
                for i, f in enumerate(folds)
            )
        now = utcnow()
        rows = [
            {
                "dataset_hash": dataset,
                "fold_fingerprint": f,
                "candidate_key": k,
                "metric": m,
                "value": 0.5,
                "fit_seconds": 0.01,
                "score_seconds": 0.001,
                "n_train": 90,
                "n_test": 10,
                "seed": 0,
                "versions": {"scikit-learn": "1.9.1"},
                "worker": "w",
                "job_id": job_id,
                "created_at": now,
            }
            for m in metrics
            for f in folds
            for k in candidates
        ]
        with sessions.begin() as s:
            s.execute(insert(FoldScore), rows)
        total = len(rows)
        del rows
        with engine.connect() as con:
            # what autovacuum would have done by the time anyone exports
            con.exec_driver_sql("ANALYZE")
            con.commit()
        reader = Principal("b", frozenset({"read"}))

        def fetch(session, after, limit):  # type: ignore[no-untyped-def]
            return queries.dataset_fold_scores_page(
                session, reader, dataset, after_id=after, limit=limit
            )

        if "--explain" in sys.argv:
            # the plan of one keyset page, to see where the time goes
            page = queries.dataset_fold_score_query(reader, dataset).where(FoldScore.id > 0)
            sql = page.limit(export.PAGE).compile(engine, compile_kwargs={"literal_binds": True})
            with engine.connect() as con:
                for (line,) in con.exec_driver_sql(f"EXPLAIN ANALYZE {sql}"):
                    print(line)

        for label, chunks in (
            ("csv", lambda: export.csv_chunks(sessions, fetch, reader)),
            ("parquet", lambda: export.parquet_chunks(sessions, fetch, reader)),
        ):
            # timed without tracemalloc (it slows allocation-heavy code several times over)
            started = time.perf_counter()
            body = b"".join(c.encode() if isinstance(c, str) else c for c in chunks())
            seconds = time.perf_counter() - started
            if label == "parquet":
                assert pq.ParquetFile(io.BytesIO(body)).metadata.num_rows == total
            size = len(body)
            del body
            tracemalloc.start()
            for _chunk in chunks():
                pass  # each chunk dropped as a client would have it sent on
            peak = tracemalloc.get_traced_memory()[1]
            tracemalloc.stop()
            print(
                f"{label}: {total} rows, {size / 1e6:.1f} MB in {seconds:.2f} s "
                f"({total / seconds:,.0f} rows/s), peak traced Python memory {peak / 1e6:.1f} MB"
            )
        engine.dispose()
    finally:
        with psycopg.connect(ADMIN, autocommit=True) as admin:
            admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


if __name__ == "__main__":
    numbers = [a for a in sys.argv[1:] if a.isdigit()]
    main(int(numbers[0]) if numbers else 100_000)
