"""Benchmark: the PostgreSQL store after a year of nightly work, and what analysts ask of it.

Fill: one real job (12 candidates, 5 outer x 4 inner folds, 3 metrics on iris, shipped with
scikit-learn) runs through the real path (run_embedded on a fresh PostgreSQL database); its rows
are then cloned server-side (INSERT ... SELECT over generate_series) into about a thousand jobs on
the same dataset hash, spread over 365 days, plus a hundred jobs each on four other datasets.
Every clone keeps the template's row shapes and values; what changes is what differs from night
to night: job ids, fold fingerprints (a new night's table gives new folds), row ids and times.
At --scale 1 that is about a million fold scores on the busy dataset.

Timed (each --repeat times, p50 and p95 in ms), through the functions the routes call:
- jobs: GET /v1/datasets/{hash}/jobs (first page of 50, with its count);
- scores: GET /v1/datasets/{hash}/fold-scores?candidate_key=..&metric=.. (pages of 100, first
  and deep);
- history: GET /v1/datasets/{hash}/history;
- job: GET /v1/jobs/{id} and the report page's context (/reports/jobs/{id}).
Then EXPLAIN (ANALYZE, BUFFERS) of every statement each one sends.

From the repository root: `.venv/bin/python tests/benchmarks/bench_store_scale.py [--scale 1]
[--repeat 30] [--keep]`.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
import uuid
from collections.abc import Callable
from pathlib import Path
from typing import Any

import psycopg
from sqlalchemy import Connection, Engine, event, func, select, text
from sqlalchemy.orm import Session

REPO = Path(__file__).resolve().parents[2]
sys.path[:0] = [str(REPO)]

from service.analysis.history import dataset_history  # noqa: E402
from service.analysis.queries import dataset_fold_scores_page, dataset_jobs  # noqa: E402
from service.api.jobs.router import _public  # noqa: E402
from service.auth import Principal  # noqa: E402
from service.config import load_settings  # noqa: E402
from service.jobs.local.driver import run_embedded  # noqa: E402
from service.jobs.queries.jobs import get_job  # noqa: E402
from service.store.db import make_engine, make_session_factory, upgrade_database  # noqa: E402
from service.store.models import Base, FoldScore, Job  # noqa: E402
from service.web.views import job_page  # noqa: E402

PG_ADMIN = "host=127.0.0.1 port=5432 user=postgres dbname=postgres"
PG_URL = "postgresql+psycopg://postgres@127.0.0.1:5432"
TEAM = "nightly"
BUSY_JOBS = 1000
OTHER_DATASETS, OTHER_JOBS = 4, 100
BATCH = 50  # clones per INSERT ... SELECT

TEMPLATE_REQUEST: dict[str, Any] = {
    "dataset": {"sample": "iris"},
    "target": "target",
    "task": "classification",
    "families": [
        {
            "estimator": "LogisticRegression",
            "fixed": {"max_iter": 500},
            "grid": {"C": [0.01, 0.1, 1.0, 10.0]},
        },
        {"estimator": "DecisionTreeClassifier", "grid": {"max_depth": [2, 3, 4, 5]}},
        {"estimator": "KNeighborsClassifier", "grid": {"n_neighbors": [3, 5, 7, 9]}},
    ],
    "outer": {"method": "stratified_kfold", "k": 5, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 4, "seed": 1},
    "metrics": ["accuracy", "balanced_accuracy", "f1_macro"],
    "pick_by": "accuracy",
}
# Tables a job writes rows of, in foreign-key order; `dataset` is cloned only for other datasets.
JOB_TABLES = (
    "job",
    "job_candidate",
    "fold",
    "job_fold",
    "work_unit",
    "fold_score",
    "pick",
    "final_model",
    "fold_prediction",
)
FINGERPRINT_COLUMNS = {"fingerprint", "fold_fingerprint"}
TIME_COLUMNS = {"created_at", "started_at", "finished_at"}
# Which rows of each table the template job wrote (the rest hold its job_id).
_TEMPLATE_ROWS = {
    "dataset": "content_hash = :hash",
    "job": "id = :job",
    "fold": "fingerprint IN (SELECT fingerprint FROM job_fold WHERE job_id = :job)",
}


def _column_expr(table: str, column: str, offsets: dict[str, int], dataset: str) -> str:
    """The SELECT expression that makes clone g's value of `column` from the template's."""
    if (table, column) in {("job", "id")} or column == "job_id":
        return f"substr(md5(t.{column} || ':' || g::text), 1, 32)"
    if column in FINGERPRINT_COLUMNS:
        return f"encode(sha256(convert_to(t.{column} || ':' || g::text, 'UTF8')), 'hex')"
    if column == "dataset_hash" or (table == "dataset" and column == "content_hash"):
        return dataset
    if column in TIME_COLUMNS:
        # the newest clone is the template's time; the oldest a year before
        return (
            f"t.{column} - (CAST(:n AS integer) - g) * (interval '365 days' / CAST(:n AS integer))"
        )
    if table in offsets and column == "id":
        return f"t.id + g * {offsets[table]}"
    if column == "unit_id":
        return f"t.unit_id + g * {offsets['work_unit']}"
    if column == "idempotency_key":
        return "NULL"
    return f"t.{column}"


def _clone(session: Connection, first: int, last: int, n: int, dataset: str) -> None:
    """Clones first..last of every job row in the store's template job, for `dataset`."""
    offsets = {
        name: int(
            session.scalar(text(f"SELECT coalesce(max(id), 0) + 1 FROM {name}_template_ids")) or 1
        )
        for name in ("work_unit", "fold_score")
    }
    for table in JOB_TABLES:
        columns = [c.name for c in Base.metadata.tables[table].columns]
        exprs = ", ".join(_column_expr(table, c, offsets, dataset) for c in columns)
        session.execute(
            text(
                f"INSERT INTO {table} ({', '.join(columns)}) SELECT {exprs} "
                f"FROM template_{table} t CROSS JOIN "
                "generate_series(CAST(:first AS integer), CAST(:last AS integer)) g "
                "ON CONFLICT DO NOTHING"
            ),
            {"first": first, "last": last, "n": n},
        )


def fill(engine: Engine, scale: float, home: Path, url: str) -> tuple[str, int]:
    """Run the template job for real, then clone it; the busy dataset's hash and its job count."""
    settings = load_settings({"FOLDWISE_HOME": str(home), "FOLDWISE_DATABASE_URL": url})
    started = time.monotonic()
    outcome = run_embedded(TEMPLATE_REQUEST, settings=settings, workers=2, base_dir=REPO)
    # One connection throughout: the template rows sit in its temporary tables.
    with engine.connect() as session:
        template = session.execute(select(Job).where(Job.id == outcome.job_id)).one()
        busy = template.dataset_hash
        per_job = session.scalar(select(func.count()).where(FoldScore.job_id == template.id))
        print(f"template job: {per_job} fold scores, {time.monotonic() - started:.0f} s")
        session.execute(text("UPDATE job SET team = :team"), {"team": TEAM})
        # run_embedded (the command line's path) registers no team; the API would have
        session.execute(
            text(
                "INSERT INTO dataset_registration (team, content_hash, created_at) "
                "VALUES (:team, :hash, now()) ON CONFLICT DO NOTHING"
            ),
            {"team": TEAM, "hash": busy},
        )
        for table in (*JOB_TABLES, "dataset"):
            session.execute(
                text(
                    f"CREATE TEMP TABLE template_{table} AS SELECT * FROM {table} "
                    f"WHERE {_TEMPLATE_ROWS.get(table, 'job_id = :job')}"
                ),
                {"job": template.id, "hash": busy},
            )
        for name in ("work_unit", "fold_score"):
            session.execute(
                text(f"CREATE TEMP TABLE {name}_template_ids AS SELECT max(id) AS id FROM {name}")
            )
        n_busy = max(1, round(BUSY_JOBS * scale))
        n_other = max(1, round(OTHER_JOBS * scale))
        quoted = "'" + busy + "'"
        for first in range(1, n_busy, BATCH):
            _clone(session, first, min(first + BATCH - 1, n_busy - 1), n_busy, quoted)
            session.commit()
            print(f"  busy dataset: {min(first + BATCH, n_busy)} jobs", end="\r", flush=True)
        print()
        for k in range(1, OTHER_DATASETS + 1):
            other = f"encode(sha256(convert_to('{busy}:other{k}', 'UTF8')), 'hex')"
            # the other datasets' clone numbers start past the busy ones', so ids never collide
            base = n_busy + (k - 1) * n_other
            session.execute(
                text(
                    f"INSERT INTO dataset (content_hash, n_rows, n_columns, columns, origin, "
                    f"created_at) SELECT {other}, n_rows, n_columns, columns, origin, created_at "
                    "FROM template_dataset"
                )
            )
            session.execute(
                text(
                    f"INSERT INTO dataset_registration (team, content_hash, "
                    f"created_at) SELECT :team, {other}, now()"
                ),
                {"team": TEAM},
            )
            _clone(session, base, base + n_other - 1, base + n_other, other)
            session.commit()
        for name in ("work_unit", "fold_score"):
            session.execute(
                text(
                    f"SELECT setval(pg_get_serial_sequence('{name}', 'id'), "
                    f"(SELECT max(id) FROM {name}))"
                )
            )
        session.commit()
    with engine.connect().execution_options(isolation_level="AUTOCOMMIT") as connection:
        connection.execute(text("VACUUM ANALYZE"))
    return busy, n_busy


def _timed(call: Callable[[], Any], repeat: int) -> tuple[float, float]:
    samples = []
    for _ in range(repeat):
        started = time.perf_counter()
        call()
        samples.append((time.perf_counter() - started) * 1000)
    p95 = statistics.quantiles(samples, n=20, method="inclusive")[18] if repeat > 1 else samples[0]
    return statistics.median(samples), p95


def _statements(engine: Engine, call: Callable[[], Any]) -> list[tuple[str, Any]]:
    seen: list[tuple[str, Any]] = []

    def record(_c: Connection, _cur: Any, statement: str, params: Any, *_: Any) -> None:
        if statement.lstrip().upper().startswith("SELECT"):
            seen.append((statement, params))

    event.listen(engine, "before_cursor_execute", record)
    try:
        call()
    finally:
        event.remove(engine, "before_cursor_execute", record)
    return seen


def main() -> None:
    """Fill a fresh database, time the analysts' questions, print their plans."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scale", type=float, default=1.0, help="1 = a year (about 1M scores)")
    parser.add_argument("--repeat", type=int, default=30)
    parser.add_argument("--keep", action="store_true", help="leave the database in place")
    args = parser.parse_args()
    name = f"foldwise_scale_{uuid.uuid4().hex[:10]}"
    url = f"{PG_URL}/{name}"
    with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    engine = make_engine(url)
    try:
        upgrade_database(url)
        started = time.monotonic()
        with tempfile.TemporaryDirectory(prefix="bench-scale-") as home:
            busy, n_busy = fill(engine, args.scale, Path(home), url)
        sessions = make_session_factory(engine)
        with sessions() as session:
            scores = session.scalar(select(func.count()).select_from(FoldScore)) or 0
            mine = session.scalar(select(func.count()).where(FoldScore.dataset_hash == busy)) or 0
            jobs = session.scalar(select(func.count()).select_from(Job)) or 0
            size = session.scalar(
                text("SELECT pg_size_pretty(pg_database_size(current_database()))")
            )
        print(
            f"filled in {time.monotonic() - started:.0f} s: {jobs} jobs, {scores} fold scores "
            f"({mine} on the busy dataset, {n_busy} jobs there), database {size}"
        )
        run(engine, busy, args.repeat)
    finally:
        engine.dispose()
        if not args.keep:
            with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
                admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        else:
            print(f"kept database {name}")


def run(engine: Engine, busy: str, repeat: int) -> None:
    """Time each question and print its plans."""
    sessions = make_session_factory(engine)
    principal = Principal(TEAM, frozenset({"read"}))
    with sessions() as session:
        newest = session.scalar(
            select(Job.id).where(Job.dataset_hash == busy).order_by(Job.created_at.desc()).limit(1)
        )
        row = session.execute(
            select(FoldScore.candidate_key, FoldScore.metric, func.max(FoldScore.id))
            .where(FoldScore.dataset_hash == busy)
            .group_by(FoldScore.candidate_key, FoldScore.metric)
            .limit(1)
        ).one()
    candidate, metric, last_id = row
    assert newest is not None

    def with_session(work: Callable[[Session], Any]) -> Callable[[], Any]:
        def call() -> Any:
            with sessions() as session:
                return work(session)

        return call

    questions: dict[str, Callable[[], Any]] = {
        "dataset jobs (first 50 + count)": with_session(
            lambda s: dataset_jobs(s, principal, busy, limit=50, offset=0)
        ),
        "fold scores by candidate+metric, page 1": with_session(
            lambda s: dataset_fold_scores_page(
                s, principal, busy, candidate_key=candidate, metric=metric, limit=100
            )
        ),
        "fold scores by candidate+metric, deep page": with_session(
            lambda s: dataset_fold_scores_page(
                s,
                principal,
                busy,
                candidate_key=candidate,
                metric=metric,
                limit=100,
                after_id=last_id // 2,
            )
        ),
        "dataset history": with_session(lambda s: dataset_history(s, principal, busy)),
        "GET /v1/jobs/{id}": with_session(
            lambda s: _public(get_job(s, newest, principal), s, principal)
        ),
        "job report page context": with_session(
            lambda s: job_page(s, get_job(s, newest, principal))
        ),
    }
    figures = []
    for label, call in questions.items():
        call()  # warm: the first call pays for plan caching and imports
        p50, p95 = _timed(call, repeat)
        figures.append((label, p50, p95))
    print("\nquestion: p50 / p95 ms over", repeat, "runs (goal p95 < 50 ms)")
    for label, p50, p95 in figures:
        print(f"  {label}: {p50:.1f} / {p95:.1f}{'' if p95 < 50 else '  OVER'}")
    print("\nplans (EXPLAIN (ANALYZE, BUFFERS) of every SELECT each question sends):")
    for label, call in questions.items():
        print(f"\n=== {label}")
        with engine.connect() as connection:
            for statement, params in _statements(engine, call):
                plan = (
                    connection.exec_driver_sql("EXPLAIN (ANALYZE, BUFFERS) " + statement, params)
                    .scalars()
                    .all()
                )
                print("--", " ".join(statement.split())[:160])
                print("\n".join(plan))


if __name__ == "__main__":
    main()
