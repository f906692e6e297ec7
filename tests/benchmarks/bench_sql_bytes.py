"""How much memory a wide sql source costs the API: the probe of issue 8 (30 rows x 10 MB).

A script, not a test: starts `foldwise serve` against a fresh PostgreSQL database, asks it to
register `SELECT repeat('x', 10000000) ... FROM generate_series(1, 30)` as a team listed on the
connection, and prints the answer and the server's resident memory before and after (VmRSS, and
the peak VmHWM, from /proc). Run from the repository root:

    .venv/bin/python tests/benchmarks/bench_sql_bytes.py [--mb 200]
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
import uuid
from pathlib import Path

import psycopg

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from api.server import running_server
from conftest import PG_ADMIN, PG_URL

QUERY = "SELECT repeat('x', 10000000) AS wide, n % 2 AS y FROM generate_series(1, 30) AS n"


def _server_pid(port: str) -> int:
    for proc in Path("/proc").iterdir():
        if proc.name.isdigit():
            try:
                argv = (proc / "cmdline").read_bytes().split(b"\0")
            except OSError:
                continue
            if b"serve" in argv and port.encode() in argv:
                return int(proc.name)
    raise SystemExit("the server process was not found")


def _memory_mb(pid: int) -> dict[str, float]:
    fields = {}
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        key, _, value = line.partition(":")
        if key in ("VmRSS", "VmHWM"):
            fields[key] = int(value.split()[0]) / 1024
    return fields


def main() -> None:
    """Print the answer and the API's memory around one wide sql source."""
    parser = argparse.ArgumentParser()
    parser.add_argument("--mb", default="200", help="FOLDWISE_SQL_MAX_MB (default 200)")
    args = parser.parse_args()
    name = f"foldwise_bench_{uuid.uuid4().hex[:10]}"
    with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    try:
        connections = {"src": {"url": f"{PG_URL}/{name}", "teams": ["bench"]}}
        with (
            tempfile.TemporaryDirectory() as home,
            running_server(
                Path(home),
                Path(home) / "server.log",
                FOLDWISE_SQL_CONNECTIONS=json.dumps(connections),
                FOLDWISE_SQL_MAX_MB=args.mb,
            ) as live,
            live.client(live.token("bench")) as client,
        ):
            pid = _server_pid(live.base_url.rsplit(":", 1)[1])
            before = _memory_mb(pid)
            started = time.monotonic()
            source = {"sql": {"connection": "src", "query": QUERY}}
            answer = client.post("/v1/datasets", json=source)
            seconds = time.monotonic() - started
            time.sleep(1)
            after = _memory_mb(pid)
            print(f"FOLDWISE_SQL_MAX_MB={args.mb}: HTTP {answer.status_code} in {seconds:.1f} s")
            print(f"  {answer.json().get('detail', '')}")
            print(
                f"  API resident memory: before {before['VmRSS']:.0f} MB, "
                f"after {after['VmRSS']:.0f} MB, peak {after['VmHWM']:.0f} MB"
            )
    finally:
        with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
            admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


if __name__ == "__main__":
    main()
