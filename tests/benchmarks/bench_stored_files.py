"""What moving tables through the store costs: write once, fetch on a miss, a hit.

A script, not a test. For each store (SQLite, and a fresh PostgreSQL database on the local
server) it registers a table of a few MB (scikit-learn's make_classification, written as
foldwise's Parquet copy), then times, as medians over rounds:

- storing the file's bytes in the store (blobs.put_file, 2 MiB chunks);
- a miss: a worker with an empty folder fetching, verifying and reading the table
  (`stored_frame`), against the baseline of what a worker did before the store held tables:
  `read_table` from a (shared) folder, i.e. pyarrow reading the file plus the canonical form;
- a hit: this host's copy checked against the store's record, first use in a process (the file
  is hashed) and later uses (remembered), and the whole read on a hit against the baseline.

With `--memory MB` it instead stores and fetches a file of random bytes of that size through
PostgreSQL and prints how much the process's peak resident memory grew (it must stay at a few
chunks, whatever the size). Run from the repository root:

    .venv/bin/python tests/benchmarks/bench_stored_files.py [--rows 50000] [--rounds 5]
    .venv/bin/python tests/benchmarks/bench_stored_files.py --memory 200
"""

from __future__ import annotations

import argparse
import hashlib
import os
import resource
import statistics
import sys
import tempfile
import time
import uuid
from collections.abc import Callable
from pathlib import Path

import pandas as pd
import psycopg
import pyarrow.parquet as pq
from sklearn.datasets import make_classification

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from conftest import PG_ADMIN, PG_URL

from service.config import load_settings
from service.datasets.sources import table_from_frame
from service.datasets.store import keep_table, read_table, stored_frame
from service.store import blobs, host_cache
from service.store.db import make_engine, make_session_factory, upgrade_database


def _median(run: Callable[[int], object], rounds: int) -> float:
    times = []
    for number in range(rounds):
        start = time.perf_counter()
        run(number)
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def _bench(url: str, folder: Path, frame: pd.DataFrame, rounds: int) -> dict[str, float]:
    upgrade_database(url)
    engine = make_engine(url)
    sessions = make_session_factory(engine)
    table = table_from_frame(frame, {"bench": "make_classification"}, field="dataset")
    api = load_settings({"FOLDWISE_HOME": str(folder / "api"), "FOLDWISE_DATABASE_URL": url})
    with sessions.begin() as session:
        path = keep_table(session, table.frame, table.content_hash, api)

    def put(number: int) -> None:  # the same bytes under a fresh key each round
        key = hashlib.sha256(f"round {number}".encode()).hexdigest()
        with sessions.begin() as session:
            blobs.put_file(session, "table", key, path)

    def miss(number: int) -> None:
        worker = load_settings(
            {"FOLDWISE_HOME": str(folder / f"w{number}"), "FOLDWISE_DATABASE_URL": url}
        )
        with sessions() as session:
            stored_frame(session, table.content_hash, worker)

    cache = host_cache.HostCache.of(api)

    def first_hit(_: int) -> None:
        host_cache._VERIFIED.clear()  # as a new process would: hash the file once
        with sessions() as session:
            host_cache.local_copy(session, cache, "table", table.content_hash)

    def later_hit(_: int) -> None:
        with sessions() as session:
            host_cache.local_copy(session, cache, "table", table.content_hash)

    def read_on_hit(_: int) -> None:
        with sessions() as session:
            stored_frame(session, table.content_hash, api)

    figures = {
        "file MB": path.stat().st_size / 1e6,
        "store write": _median(put, rounds),
        "miss: fetch+verify+read": _median(miss, rounds),
        "hit: first use in a process": _median(first_hit, rounds),
        "hit: later uses": _median(later_hit, rounds),
        "read on a hit": _median(read_on_hit, rounds),
        "pyarrow alone reading the local file": _median(
            lambda _: pq.read_table(path).to_pandas(), rounds
        ),
        "baseline: read_table from the folder": _median(
            lambda _: read_table(table.content_hash, path.parent), rounds
        ),
    }
    engine.dispose()
    return figures


def _peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # KiB on Linux


def _memory(url: str, folder: Path, megabytes: int) -> None:
    upgrade_database(url)
    engine = make_engine(url)
    sessions = make_session_factory(engine)
    source = folder / "random.bin"
    with source.open("wb") as out:
        for _ in range(megabytes):
            out.write(os.urandom(1024 * 1024))
    key = hashlib.sha256(b"memory").hexdigest()
    cache = host_cache.HostCache({"table": folder / "d", "model": folder / "m"}, 1 << 40)
    before = _peak_mb()
    with sessions.begin() as session:
        blobs.put_file(session, "table", key, source)
    stored = _peak_mb()
    with sessions() as session:
        copy = host_cache.local_copy(session, cache, "table", key)
    fetched = _peak_mb()
    engine.dispose()
    intact = copy.read_bytes() == source.read_bytes()
    print(
        f"{megabytes} MB through PostgreSQL: peak resident memory {before:.0f} MB before, "
        f"+{stored - before:.0f} MB after storing, +{fetched - before:.0f} MB after fetching; "
        f"copy identical: {intact}"
    )


def main() -> None:
    """Print the medians for both stores."""
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=50_000)
    parser.add_argument("--rounds", type=int, default=5)
    parser.add_argument("--memory", type=int, default=0, help="MB; measure memory only")
    args = parser.parse_args()
    x, y = make_classification(n_samples=args.rows, n_features=20, random_state=0)
    frame = pd.DataFrame(x, columns=[f"x{i}" for i in range(20)]).assign(target=y)
    name = f"foldwise_bench_{uuid.uuid4().hex[:10]}"
    with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    try:
        with tempfile.TemporaryDirectory() as temporary:
            folder = Path(temporary)
            if args.memory:
                _memory(f"{PG_URL}/{name}", folder, args.memory)
                return
            sqlite_url = f"sqlite:///{folder / 'sqlite' / 'store.sqlite'}"
            results = {
                "SQLite": _bench(sqlite_url, folder / "s", frame, args.rounds),
                "PostgreSQL": _bench(f"{PG_URL}/{name}", folder / "p", frame, args.rounds),
            }
    finally:
        with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
            admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
    print(f"{args.rows} rows x 21 columns, medians of {args.rounds} rounds (seconds)")
    for store, figures in results.items():
        baseline = figures["baseline: read_table from the folder"]
        print(f"\n{store} (file {figures.pop('file MB'):.1f} MB)")
        for what, seconds in figures.items():
            print(f"  {what:42s} {seconds * 1000:9.1f} ms  {seconds / baseline:6.2f}x baseline")


if __name__ == "__main__":
    main()
