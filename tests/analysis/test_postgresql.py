"""The analysis services on PostgreSQL, the production store: queries, comparison, export."""

from __future__ import annotations

import copy
import io
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pyarrow.parquet as pq
import pytest
from scipy import stats
from sqlalchemy import text
from sqlalchemy.orm import Session, sessionmaker

from service.analysis import export, queries
from service.analysis.history import dataset_history
from service.auth import Principal
from service.config import load_settings
from service.jobs.local.driver import run_embedded
from service.jobs.queries.datasets import register_dataset
from service.store.db import make_engine, make_session_factory

from .conftest import IRIS_LR

READER = Principal("local", frozenset({"read"}))


@pytest.fixture
def pg_jobs(
    tmp_path: Path, postgresql_url: str
) -> Iterator[tuple[sessionmaker[Session], str, str, str]]:
    """Two embedded jobs on iris in a fresh PostgreSQL store: the same folds twice over."""
    settings = load_settings(
        {"FOLDWISE_HOME": str(tmp_path / "home"), "FOLDWISE_DATABASE_URL": postgresql_url}
    )
    one_repeat = {"method": "stratified_kfold", "k": 3, "seed": 0}
    first = run_embedded(dict(copy.deepcopy(IRIS_LR), outer=one_repeat), settings=settings)
    other = dict(copy.deepcopy(IRIS_LR), outer={**one_repeat, "seed": 4})
    second = run_embedded(other, settings=settings)
    engine = make_engine(postgresql_url)
    sessions = make_session_factory(engine)
    dataset = first.result["dataset_hash"]
    with sessions.begin() as session:
        register_dataset(session, dataset, "local")  # the embedded path registers no team
    try:
        yield sessions, dataset, first.job_id, second.job_id
    finally:
        engine.dispose()


def test_queries_comparison_and_export_on_postgresql(pg_jobs: Any) -> None:
    sessions, dataset, first, second = pg_jobs
    with sessions() as session:
        expected = [
            r[0]
            for r in session.execute(
                text(
                    "SELECT DISTINCT fs.id FROM fold_score fs "
                    "JOIN job_fold jf ON jf.fingerprint = fs.fold_fingerprint "
                    "JOIN job_candidate jc ON jc.job_id = jf.job_id "
                    "AND jc.candidate_key = fs.candidate_key "
                    "WHERE fs.dataset_hash = :h AND jf.role = 'outer' ORDER BY fs.id"
                ),
                {"h": dataset},
            )
        ]
        pages: list[int] = []
        after = 0
        while True:
            page = queries.dataset_fold_scores_page(
                session, READER, dataset, after_id=after, limit=5, role="outer"
            )
            pages += [s.id for s in page]
            if len(page) < 5:
                break
            after = page[-1].id
        assert pages == expected and len(expected) == 2 * 3 * 2  # jobs x outer folds x metrics

        comparison = queries.compare_jobs(session, READER, first, second)
        assert not comparison.same_folds  # other outer seed: Welch, and the weaker statement
        accuracy = comparison.metrics[0]
        # scipy's Welch test is the reference
        reference = stats.ttest_ind(accuracy.left, accuracy.right, equal_var=False)
        assert accuracy.test.p_value == pytest.approx(reference.pvalue)
        itself = queries.compare_jobs(session, READER, first, first)
        assert itself.same_folds and all(m.test.p_value == 1.0 for m in itself.metrics)

        history = dataset_history(session, READER, dataset)
        assert [p.job_id for p in history.jobs] == [first, second]

    def fetch(session: Session, after: int, limit: int) -> list[Any]:
        return queries.dataset_fold_scores_page(
            session, READER, dataset, after_id=after, limit=limit
        )

    body = b"".join(export.parquet_chunks(sessions, fetch, READER))
    table = pq.read_table(io.BytesIO(body))
    with sessions() as session:
        everything = queries.dataset_fold_scores_page(session, READER, dataset, limit=1000)
        assert table.column("id").to_pylist() == [s.id for s in everything]
        assert table.column("value").to_pylist() == [s.value for s in everything]
