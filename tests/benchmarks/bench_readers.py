"""Benchmark: concurrent readers against the embedded server and the PostgreSQL-backed one.

For each mode, a live `foldwise serve` on loopback with a finished iris job (the PostgreSQL mode
with Redis as broker and one `foldwise worker` to run it), then 50 and 200 readers for 20 s each
(tests/api/load.py: each reader asks for the job and a page of its fold scores in turn). Printed
per run: answered requests/s, p50/p99 latency, errors, 429s (back-pressure, retried after the
Retry-After seconds), /healthz probes every 0.25 s (max latency, probes over 1 s), and the time
until a request and a probe answer once the load has ended.

Needs the local Redis and PostgreSQL (as the tests do). From the repository root:
`.venv/bin/python tests/benchmarks/bench_readers.py [--readers 50 200] [--seconds 20]
[--mode embedded postgresql]`.
"""

from __future__ import annotations

import argparse
import contextlib
import os
import subprocess
import sys
import tempfile
import uuid
from collections.abc import Iterator
from pathlib import Path

import psycopg
import redis

REPO = Path(__file__).resolve().parents[2]
sys.path[:0] = [str(REPO), str(REPO / "tests")]  # the tests import their helpers as api.*

from api.load import run_readers  # noqa: E402
from api.server import Server, running_server  # noqa: E402
from distributed.stack import Stack  # noqa: E402
from distributed.test_readers_under_load import _finished_job  # noqa: E402

PG_ADMIN = "host=127.0.0.1 port=5432 user=postgres dbname=postgres"
PG_URL = "postgresql+psycopg://postgres@127.0.0.1:5432"


@contextlib.contextmanager
def _redis_db() -> Iterator[str]:
    """A Redis database number claimed the way tests/distributed/redis_claim.py claims one."""
    admin = redis.Redis("127.0.0.1", 6379, db=0)
    for number in range(1, 16):
        if admin.set(f"foldwise-test:redis-db:{number}", "1", nx=True, ex=1800):
            break
    else:
        raise SystemExit("every Redis database 1-15 is claimed")
    redis.Redis("127.0.0.1", 6379, db=number).flushdb()
    try:
        yield f"redis://127.0.0.1:6379/{number}"
    finally:
        redis.Redis("127.0.0.1", 6379, db=number).flushdb()
        admin.delete(f"foldwise-test:redis-db:{number}")


@contextlib.contextmanager
def _pg_db() -> Iterator[str]:
    name = f"foldwise_bench_{uuid.uuid4().hex[:12]}"
    with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    try:
        yield f"{PG_URL}/{name}"
    finally:
        with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
            admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


@contextlib.contextmanager
def _server(mode: str, scratch: Path) -> Iterator[Server]:
    home = scratch / mode
    if mode == "embedded":
        with running_server(home, scratch / f"{mode}.log") as server:
            yield server
        return
    with _pg_db() as database, _redis_db() as broker:
        env = {"FOLDWISE_DATABASE_URL": database, "FOLDWISE_BROKER_URL": broker}
        full = {**os.environ, **env, "FOLDWISE_HOME": str(home)}
        subprocess.run(
            [sys.executable, "-m", "service.cli.main", "db", "upgrade"],
            cwd=REPO,
            env=full,
            check=True,
            capture_output=True,
        )
        workers = Stack({**env, "FOLDWISE_HOME": str(home)}, home)
        try:
            workers.wait_ready(workers.start_worker("w1"), "ready.")
            with running_server(home, scratch / f"{mode}.log", **env) as server:
                yield server
        finally:
            workers.stop()


def main() -> None:
    """Run every mode at every reader count and print one line per run."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--readers", type=int, nargs="+", default=[50, 200])
    parser.add_argument("--seconds", type=float, default=20.0)
    parser.add_argument("--mode", nargs="+", default=["embedded", "postgresql"])
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="bench-readers-") as scratch:
        for mode in args.mode:
            with _server(mode, Path(scratch)) as server:
                token, job_id = _finished_job(server)
                for readers in args.readers:
                    report = run_readers(
                        server.base_url, token, job_id, readers=readers, seconds=args.seconds
                    )
                    print(report.line(mode), flush=True)
                    for error in report.errors[:3]:
                        print(f"  e.g. {error}", flush=True)


if __name__ == "__main__":
    main()
