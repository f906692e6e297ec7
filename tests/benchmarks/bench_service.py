"""Benchmark: the distributed path (Celery workers on Redis, PostgreSQL) against scikit-learn.

The same mid-sized job as bench_select.py, submitted as the API submits it (store, commit,
publish unit ids), run by 1 and then 2 real `foldwise worker` processes (one pool process each),
against bench_select's scikit-learn reference doing the same fits with n_jobs 1 and 2, alternated
in the same run. A ratio is printed only if both sides produced the same outer scores and pick.

- wall: from submission to the job's `succeeded` row, workers already running (a service's
  workers are long-lived; the reference's wall includes its interpreter start-up);
- dispatch overhead per unit = (wall - sum of unit seconds / workers) / units, where unit
  seconds are the fit-and-score time each unit records;
- fold-score inserts: rows/s into PostgreSQL with insert_ignoring_duplicates, in one
  transaction per unit-sized batch (inner k folds x metrics rows), new rows and then the same
  rows again (every one a duplicate, as a redelivered unit writes them).

Needs the local Redis and PostgreSQL (as the tests do). From the repository root:
`.venv/bin/python tests/benchmarks/bench_service.py [--rounds 3] [--rows 2000]`.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
import uuid
from pathlib import Path
from typing import Any

import psycopg
import redis
from sqlalchemy import func, select

REPO = Path(__file__).resolve().parents[2]
sys.path[:0] = [str(REPO), str(Path(__file__).resolve().parent)]

import bench_select  # noqa: E402  (the task, the reference and the same-work check)

from service.store.db import insert_ignoring_duplicates, upgrade_database  # noqa: E402
from service.store.models import Fold, FoldScore, Job, JobCandidate, WorkUnit  # noqa: E402
from tests.distributed.stack import Stack  # noqa: E402

PG_ADMIN = "host=127.0.0.1 port=5432 user=postgres dbname=postgres"
PG_URL = "postgresql+psycopg://postgres@127.0.0.1:5432"
REDIS_DB = 14  # tests claim databases from 1 up; a benchmark run takes a fixed one and flushes it
GOAL_RATIO, GOAL_OVERHEAD_MS = 1.15, 20.0


def _database() -> str:
    name = f"foldwise_bench_{uuid.uuid4().hex[:10]}"
    with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    return name


def _drop(name: str) -> None:
    with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
        admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


def _stack(folder: Path, tag: str) -> tuple[Stack, str]:
    name = _database()
    redis.Redis(db=REDIS_DB).flushdb()
    env = {
        "FOLDWISE_HOME": str(folder / "homes" / tag),
        "FOLDWISE_DATABASE_URL": f"{PG_URL}/{name}",
        "FOLDWISE_BROKER_URL": f"redis://127.0.0.1:6379/{REDIS_DB}",
        "FOLDWISE_DATA_ROOTS": str(folder),
    }
    upgrade_database(env["FOLDWISE_DATABASE_URL"])
    return Stack(env, Path(env["FOLDWISE_HOME"])), name


def run_distributed(folder: Path, job: dict[str, Any], workers: int, tag: str) -> dict[str, Any]:
    """One job on `workers` fresh worker processes; wall time from submission to success."""
    stack, database = _stack(folder, tag)
    try:
        started = [stack.start_worker(f"w{i + 1}") for i in range(workers)]
        for process in started:
            stack.wait_ready(process, "ready.", timeout=300)  # a busy shared machine
        began = time.perf_counter()
        job_id = stack.submit(job)
        while stack.job(job_id).status in ("queued", "running"):
            time.sleep(0.02)
        wall = time.perf_counter() - began
        row = stack.job(job_id)
        if row.status != "succeeded":
            sys.exit(f"distributed job {row.status}: {row.error}\n{stack.logs()}")
        with stack.sessions() as session:
            unit_seconds = session.scalar(
                select(func.sum(WorkUnit.seconds)).where(WorkUnit.job_id == job_id)
            )
            units = session.scalar(select(func.count()).where(WorkUnit.job_id == job_id))
        inserts = measure_inserts(stack, job_id) if tag.endswith("-0") else None
        assert row.result is not None
        return {
            "wall": wall,
            "unit_seconds": float(unit_seconds or 0),
            "units": int(units or 0),
            "result": row.result,
            "inserts": inserts,
        }
    finally:
        stack.stop()
        _drop(database)


def measure_inserts(stack: Stack, job_id: str, batches: int = 1500) -> dict[str, float]:
    """Fold-score rows/s in unit-sized transactions: new rows, then the same rows again."""
    with stack.sessions() as session:
        fold = session.scalars(select(Fold.fingerprint).limit(1)).one()
        key = session.scalars(
            select(JobCandidate.candidate_key).where(JobCandidate.job_id == job_id).limit(1)
        ).one()
        dataset_hash = session.get_one(Job, job_id).dataset_hash
    # inner k = 3 folds x 2 metrics, as one inner unit writes; new metric names keep keys unique
    per_batch = 6
    template = {
        "dataset_hash": dataset_hash,
        "fold_fingerprint": fold,
        "candidate_key": key,
        "value": 0.5,
        "fit_seconds": 0.01,
        "score_seconds": 0.001,
        "n_train": 100,
        "n_test": 50,
        "seed": 0,
        "versions": {"bench": "1"},
        "worker": "bench",
        "job_id": job_id,
        "unit_id": None,
    }
    batches_rows = [
        [{**template, "metric": f"bench_{b}_{i}"} for i in range(per_batch)] for b in range(batches)
    ]
    figures = {}
    for label in ("new", "duplicate"):
        began = time.perf_counter()
        for rows in batches_rows:
            with stack.sessions.begin() as session:
                insert_ignoring_duplicates(session, FoldScore, rows)
        figures[label] = batches * per_batch / (time.perf_counter() - began)
    return figures


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--rows", type=int, default=2000)
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="foldwise-bench-service-"))
    csv, job_path = bench_select.build_task(folder, args.rows)
    (folder / "reference_select.py").write_text(bench_select.REFERENCE_SCRIPT, encoding="utf-8")
    job = bench_select.json.loads(job_path.read_text(encoding="utf-8"))
    walls: dict[str, list[float]] = {}
    overhead: dict[int, list[float]] = {1: [], 2: []}
    inserts: dict[str, float] = {}
    for round_ in range(args.rounds):
        for workers in (1, 2):
            seconds, reference = bench_select.run_reference(
                folder, job_path, csv, workers, f"sk-{workers}-{round_}"
            )
            walls.setdefault(f"scikit-learn n_jobs={workers}", []).append(seconds)
            ours = run_distributed(folder, job, workers, f"fw-{workers}-{round_}")
            problems = bench_select.same_work(ours["result"], reference)
            if problems:
                print("not the same work:\n  " + "\n  ".join(problems), file=sys.stderr)
                return 1
            walls.setdefault(f"foldwise {workers} worker(s)", []).append(ours["wall"])
            per_unit = (ours["wall"] - ours["unit_seconds"] / workers) / ours["units"]
            overhead[workers].append(per_unit)
            inserts = ours["inserts"] or inserts
            print(
                f"round {round_ + 1} workers {workers}: foldwise {ours['wall']:.2f}s "
                f"({ours['units']} units, {ours['unit_seconds']:.2f} unit-s), "
                f"scikit-learn {seconds:.2f}s",
                file=sys.stderr,
            )
    print(f"\nrows {args.rows}, rounds {args.rounds}, medians:")
    for label, values in walls.items():
        print(f"  {label:<28} {statistics.median(values):8.2f} s")
    for workers in (1, 2):
        ratio = statistics.median(walls[f"foldwise {workers} worker(s)"]) / statistics.median(
            walls[f"scikit-learn n_jobs={workers}"]
        )
        ms = statistics.median(overhead[workers]) * 1000
        goal = f" (goal <= {GOAL_RATIO})" if workers == 1 else ""
        print(
            f"  {workers} worker(s): foldwise / scikit-learn {ratio:.3f}{goal}, "
            f"dispatch overhead {ms:.1f} ms/unit (goal < {GOAL_OVERHEAD_MS})"
        )
    print(
        f"  fold-score inserts into PostgreSQL: {inserts['new']:.0f} rows/s new, "
        f"{inserts['duplicate']:.0f} rows/s duplicates (6-row transactions)"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
