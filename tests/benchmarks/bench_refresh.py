"""Benchmark: an unchanged-data refresh end to end on a mid-sized table (goal: under one second).

A live `foldwise serve` (embedded: SQLite, local pool) with a data root holding a CSV of
100,000 rows x 20 columns. A schedule is created on it and refreshed once (that runs a small job,
GaussianNB with 2 x 2 folds, so the schedule has a last job); then the table is left alone and
`POST /v1/schedules/{id}/refresh` is timed from request to answer, each answer checked to be
"unchanged" with no new job. The refresh re-reads the file, canonicalises and hashes it, and
compares the hash with the last job's, which is all an unchanged refresh may cost.

Also timed in-process, to say where the time goes: reading the CSV, canonical hashing.

From the repository root: `.venv/bin/python tests/benchmarks/bench_refresh.py [--rows 100000]
[--columns 20] [--rounds 7]`. Exit code 0 after a report, 1 if a refresh was not "unchanged".
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parents[2]
sys.path[:0] = [str(REPO), str(REPO / "tests")]

from api.server import running_server  # noqa: E402

from service.datasets.canonical import canonical_frame, content_hash  # noqa: E402
from service.datasets.files import read_dataset_file  # noqa: E402

GOAL_SECONDS = 1.0


def _table(path: Path, rows: int, columns: int) -> None:
    rng = np.random.default_rng(0)
    values = rng.normal(size=(rows, columns - 1))
    frame = pd.DataFrame(values, columns=[f"x{i:02d}" for i in range(columns - 1)])
    frame["target"] = (values[:, 0] + rng.normal(size=rows) > 0).astype(int)
    frame.to_csv(path, index=False)


def main() -> int:
    """Run the benchmark and print the report."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=100_000)
    parser.add_argument("--columns", type=int, default=20)
    parser.add_argument("--rounds", type=int, default=7)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="foldwise-bench-refresh-") as tmp:
        root, home = Path(tmp) / "data", Path(tmp) / "home"
        root.mkdir()
        csv = root / "table.csv"
        _table(csv, args.rows, args.columns)
        size_mb = csv.stat().st_size / 1e6
        template = {
            "target": "target",
            "task": "classification",
            "families": [{"estimator": "GaussianNB"}],
            "preprocess": "none",
            "outer": {"method": "stratified_kfold", "k": 2, "seed": 0},
            "inner": {"method": "stratified_kfold", "k": 2, "seed": 1},
            "metrics": ["accuracy"],
        }
        with (
            running_server(home, Path(tmp) / "server.log", FOLDWISE_DATA_ROOTS=str(root)) as server,
            server.client(server.token("bench")) as client,
        ):
            created = client.post(
                "/v1/schedules",
                json={"source": {"path": "table.csv"}, "template": template, "cron": "0 3 1 1 *"},
            )
            created.raise_for_status()
            sid = created.json()["id"]
            first = client.post(f"/v1/schedules/{sid}/refresh").json()
            server.wait_for_job(client, first["job_id"])
            jobs = server.count_jobs()
            timings = []
            for _ in range(args.rounds):
                start = time.perf_counter()
                answer = client.post(f"/v1/schedules/{sid}/refresh")
                timings.append(time.perf_counter() - start)
                if answer.json().get("status") != "unchanged" or server.count_jobs() != jobs:
                    print(f"refresh was not unchanged: {answer.text[:300]}", file=sys.stderr)
                    return 1
        reads, hashes = [], []
        for _ in range(3):
            start = time.perf_counter()
            raw, _ = read_dataset_file(csv, field="path")
            reads.append(time.perf_counter() - start)
            start = time.perf_counter()
            content_hash(canonical_frame(raw))
            hashes.append(time.perf_counter() - start)
        read_s, hash_s = statistics.median(reads), statistics.median(hashes)
    median = statistics.median(timings)
    print(f"table: {args.rows} rows x {args.columns} columns, {size_mb:.1f} MB of CSV")
    print(
        f"unchanged refresh over HTTP, {args.rounds} rounds: median {median:.3f} s, "
        f"min {min(timings):.3f} s, max {max(timings):.3f} s "
        f"(goal < {GOAL_SECONDS:.1f} s: {'met' if median < GOAL_SECONDS else 'NOT met'})"
    )
    print(
        f"in-process parts (median of 3): read CSV {read_s:.3f} s, "
        f"canonicalise + hash {hash_s:.3f} s"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
