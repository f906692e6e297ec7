"""Performance of the `nested` interval against the plain job, on 1 and 2 workers (issue 11).

The coverage study's mid setting (tests/benchmarks/bench_coverage.py): a classification table of
300 rows drawn from its fixed population, three candidates, outer 5 x inner 5, and the nested
interval with R repetitions. Each run starts on an empty store (nothing reused; its schema made
before the clock starts) and is timed from submission to result:
- embedded: `run_embedded` on the local process pool, 1 and 2 workers;
- Celery (`--celery`): real `foldwise worker` processes (one pool process each) on Redis and a
  fresh PostgreSQL database, 1 and then 2 workers.
The machine's own parallel capacity is measured in the same run: one CPU-bound function alone
(about a second), then two copies at once in two processes; capacity = 2 x (time alone) / (time
of the pair), measured before each round of cells and once at the end, and its median taken
(one short measurement moved between 1.06x and 1.28x within a minute). The same is printed for
scikit-learn doing the plain job's fits (two copies of a grid search inside cross_val_score):
fits share memory bandwidth and caches as a pure-Python loop does not, so that capacity is the
ceiling for this kind of work; the issue's goal is against the first.
The 1 -> 2 worker speed-up is printed as a share of that capacity (goal: at least 90%).

Run from the repository root:
`PYTHONPATH=. .venv/bin/python tests/benchmarks/bench_nested_interval.py [--repetitions 3]
[--runs 1] [--celery]`
"""

from __future__ import annotations

import argparse
import multiprocessing
import statistics
import sys
import tempfile
import time
import uuid
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
from threadpoolctl import threadpool_limits

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_coverage import FAMILIES, frame_of, population  # noqa: E402

from service.config import load_settings  # noqa: E402
from service.jobs.local.driver import run_embedded  # noqa: E402
from service.store.db import upgrade_database  # noqa: E402

N_ROWS = 300


def _spin(n: int) -> float:
    """A CPU-bound function of pure Python (no BLAS, no I/O)."""
    total = 0.0
    for i in range(n):
        total += (i % 7) * 0.5
    return total


def _nested_fits(rounds: int) -> float:
    """The plain job's fits done by scikit-learn alone: a grid search inside cross_val_score."""
    from sklearn.linear_model import LogisticRegression
    from sklearn.model_selection import GridSearchCV, StratifiedKFold, cross_val_score
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    X, y = population("classification")
    rows = np.random.default_rng(7).choice(len(y), size=N_ROWS, replace=False)
    family = FAMILIES["classification"][0]
    search = GridSearchCV(
        make_pipeline(StandardScaler(), LogisticRegression(**family["fixed"])),
        {f"logisticregression__{k}": v for k, v in family["grid"].items()},
        cv=StratifiedKFold(5, shuffle=True, random_state=1),
    )
    total = 0.0
    with threadpool_limits(1):
        for _ in range(rounds):
            outer = StratifiedKFold(5, shuffle=True, random_state=0)
            total += float(cross_val_score(search, X[rows], y[rows], cv=outer).sum())
    return total


def capacity(
    work: Callable[[int], float] = _spin, n: int = 30_000_000
) -> tuple[float, float, float]:
    """(seconds alone, seconds of two copies at once, capacity = 2 x alone / pair)."""
    context = multiprocessing.get_context("fork")
    with context.Pool(1) as one:
        one.apply(work, (1,))  # the process up and its imports made before the clock starts
        started = time.perf_counter()
        one.apply(work, (n,))
        alone = time.perf_counter() - started
    with context.Pool(2) as two:
        two.map(work, [1, 1], chunksize=1)
        started = time.perf_counter()
        two.map(work, [n, n], chunksize=1)
        pair = time.perf_counter() - started
    return alone, pair, 2 * alone / pair


def request(table: Path, repetitions: int | None) -> dict[str, Any]:
    """The mid setting's job, plain or with the nested interval."""
    body: dict[str, Any] = {
        "dataset": {"path": str(table)},
        "target": "target",
        "task": "classification",
        "families": FAMILIES["classification"],
        "outer": {"method": "stratified_kfold", "k": 5, "seed": 0},
        "inner": {"method": "stratified_kfold", "k": 5, "seed": 1},
        "metrics": ["accuracy"],
        "reuse": False,
    }
    if repetitions:
        body["interval"] = {"method": "nested", "repetitions": repetitions}
    return body


def write_table(folder: Path) -> Path:
    """One table of the mid setting as a CSV."""
    X, y = population("classification")
    rows = np.random.default_rng(7).choice(len(y), size=N_ROWS, replace=False)
    path = folder / "mid.csv"
    frame_of(X[rows], y[rows]).to_csv(path, index=False)
    return path


def embedded(body: dict[str, Any], workers: int, folder: Path) -> tuple[float, int]:
    """(wall seconds, fits) of one embedded run on a fresh store."""
    settings = load_settings({"FOLDWISE_HOME": str(folder / uuid.uuid4().hex)})
    # the empty store is made before the clock starts: creating the schema is once per store,
    # not part of any job (run_embedded finds it current, as it would on every later job)
    upgrade_database(settings.database_url)
    started = time.perf_counter()
    result = run_embedded(body, settings=settings, workers=workers, base_dir=folder).result
    return time.perf_counter() - started, int(result["work"]["fits"])


def celery_runs(
    bodies: dict[str, dict[str, Any]], folder: Path, runs: int
) -> dict[tuple[str, int], float]:
    """Median wall seconds of each body on 1, then 2 real Celery workers over `runs` runs (a
    fresh database and fresh workers each run)."""
    # imported here: only --celery needs PostgreSQL, Redis and the test stack
    import psycopg
    import redis

    from tests.distributed.stack import deploy

    admin_dsn = "host=127.0.0.1 port=5432 user=postgres dbname=postgres"
    broker = redis.Redis("127.0.0.1", 6379, db=0)
    number = next(
        n for n in range(1, 16) if broker.set(f"foldwise-test:redis-db:{n}", "1", nx=True, ex=1800)
    )
    seconds: dict[tuple[str, int], list[float]] = {}
    cells = [(workers, name) for workers in (1, 2) for name in bodies for _ in range(runs)]
    try:
        for workers, name in cells:
            database = f"foldwise_bench_{uuid.uuid4().hex[:12]}"
            with psycopg.connect(admin_dsn, autocommit=True) as admin:
                admin.execute(f'CREATE DATABASE "{database}"')
            home = folder / uuid.uuid4().hex
            env = {
                "FOLDWISE_HOME": str(home),
                "FOLDWISE_DATABASE_URL": f"postgresql+psycopg://postgres@127.0.0.1/{database}",
                "FOLDWISE_BROKER_URL": f"redis://127.0.0.1:6379/{number}",
                "FOLDWISE_DATA_ROOTS": str(folder),
            }
            stack = deploy(env, home)
            try:
                started = [stack.start_worker(f"w{i}") for i in range(workers)]
                for process in started:
                    stack.wait_ready(process, "ready.")
                began = time.perf_counter()
                job_id = stack.submit(bodies[name])
                stack.wait_finished(job_id, 3600)
                seconds.setdefault((name, workers), []).append(time.perf_counter() - began)
                print(
                    f"Celery {name} on {workers}: {seconds[(name, workers)][-1]:.1f} s", flush=True
                )
            finally:
                stack.stop()
                redis.Redis("127.0.0.1", 6379, db=number).flushdb()
                with psycopg.connect(admin_dsn, autocommit=True) as admin:
                    admin.execute(f'DROP DATABASE IF EXISTS "{database}" WITH (FORCE)')
    finally:
        broker.delete(f"foldwise-test:redis-db:{number}")
    return {cell: statistics.median(found) for cell, found in seconds.items()}


def _median_capacity(found: list[tuple[float, float, float]]) -> tuple[float, float, float]:
    return (
        statistics.median(c[0] for c in found),
        statistics.median(c[1] for c in found),
        statistics.median(c[2] for c in found),
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repetitions", type=int, default=3)
    parser.add_argument("--runs", type=int, default=1, help="rounds (medians over them)")
    parser.add_argument("--celery", action="store_true", help="also through Celery workers")
    args = parser.parse_args()
    spins: list[tuple[float, float, float]] = []
    fitting: list[tuple[float, float, float]] = []

    def measure_capacity() -> None:
        spins.append(capacity())
        fitting.append(capacity(_nested_fits, 2))
        print(
            f"capacity: pure Python {spins[-1][2]:.2f}x ({spins[-1][0]:.2f} s alone, "
            f"{spins[-1][1]:.2f} s the pair), scikit-learn's fits {fitting[-1][2]:.2f}x",
            flush=True,
        )

    with tempfile.TemporaryDirectory() as temporary, threadpool_limits(1):
        folder = Path(temporary)
        table = write_table(folder)
        bodies = {"plain": request(table, None), "nested": request(table, args.repetitions)}
        found: dict[tuple[str, int], list[float]] = {}
        fits: dict[str, int] = {}
        # rounds: the capacity, then every cell once, so a change in the neighbours' load lands
        # on the capacity and the cells alike rather than on one cell
        for _ in range(args.runs):
            measure_capacity()
            for name, body in bodies.items():
                for workers in (1, 2):
                    seconds, fits[name] = embedded(body, workers, folder)
                    found.setdefault((name, workers), []).append(seconds)
                    print(f"embedded {name} on {workers}: {seconds:.1f} s", flush=True)
        cells = {cell: statistics.median(values) for cell, values in found.items()}
        through_celery = celery_runs(bodies, folder, args.runs) if args.celery else {}
    measure_capacity()
    alone, pair, machine = _median_capacity(spins)
    fits_machine = _median_capacity(fitting)[2]
    print(
        f"\nmid setting: n = {N_ROWS}, 3 candidates, outer 5 x inner 5, nested R = "
        f"{args.repetitions}; medians of {args.runs} round(s); empty store each run\n"
    )
    print(
        "| job | fits | path | 1 worker (s) | 2 workers (s) | speed-up | share of capacity "
        "| share of the fits' capacity |"
    )
    print("|---|---|---|---|---|---|---|---|")
    for name in bodies:
        rows = [("embedded pool", cells[(name, 1)], cells[(name, 2)])]
        if through_celery:
            rows.append(("Celery", through_celery[(name, 1)], through_celery[(name, 2)]))
        for path, one, two in rows:
            speedup = one / two
            print(
                f"| {name} | {fits[name]} | {path} | {one:.1f} | {two:.1f} | "
                f"{speedup:.2f}x | {speedup / machine:.0%} | {speedup / fits_machine:.0%} |"
            )
    print(
        f"\nnested / plain on 1 worker: {fits['nested'] / fits['plain']:.1f}x the fits, "
        f"{cells[('nested', 1)] / cells[('plain', 1)]:.1f}x the wall time\n"
        f"machine capacity (the issue's measure: a pure-Python function alone, then two copies "
        f"at once): {machine:.2f}x, the median of {len(spins)} measurements "
        f"({', '.join(f'{c[2]:.2f}' for c in spins)}; alone {alone:.2f} s, pair {pair:.2f} s)\n"
        f"the same for scikit-learn doing the plain job's fits (a grid search inside "
        f"cross_val_score, twice): {fits_machine:.2f}x "
        f"({', '.join(f'{c[2]:.2f}' for c in fitting)})"
    )


if __name__ == "__main__":
    main()
