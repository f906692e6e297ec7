"""The embedded path against a real store: SQLite and PostgreSQL hold the same fold scores."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import func, select

from service.config import load_settings
from service.errors import BadInput
from service.jobs.execution.execute import execute_unit, worker_name
from service.jobs.local.driver import JobFailed, run_embedded
from service.store.db import make_engine, make_session_factory
from service.store.models import FoldScore, Job, WorkUnit


def _request(**changes: Any) -> dict[str, Any]:
    request: dict[str, Any] = {
        "dataset": {"sample": "iris"},
        "target": "target",
        "task": "classification",
        "families": [
            {"estimator": "KNeighborsClassifier", "grid": {"n_neighbors": [1, 5, 15]}},
            {"estimator": "LogisticRegression", "fixed": {"max_iter": 500}},
        ],
        "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
        "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
        "metrics": ["accuracy", "balanced_accuracy"],
    }
    request.update(changes)
    return request


def _settings(tmp_path: Path, url: str | None = None) -> Any:
    env = {"FOLDWISE_HOME": str(tmp_path / "home")}
    if url:
        env["FOLDWISE_DATABASE_URL"] = url
    return load_settings(env)


def _scores(url: str) -> list[tuple[str, str, str, float]]:
    engine = make_engine(url)
    try:
        with make_session_factory(engine)() as session:
            rows = session.execute(
                select(
                    FoldScore.fold_fingerprint,
                    FoldScore.candidate_key,
                    FoldScore.metric,
                    FoldScore.value,
                ).order_by(FoldScore.fold_fingerprint, FoldScore.candidate_key, FoldScore.metric)
            )
            return [tuple(r) for r in rows]  # type: ignore[misc]
    finally:
        engine.dispose()


def test_postgresql_store_holds_the_same_scores_as_sqlite(
    tmp_path: Path, postgresql_url: str
) -> None:
    on_sqlite = run_embedded(_request(), settings=_settings(tmp_path / "a"), workers=2)
    on_postgres = run_embedded(
        _request(), settings=_settings(tmp_path / "b", postgresql_url), workers=2
    )
    assert on_postgres.result["outer"] == on_sqlite.result["outer"]
    assert on_postgres.result["final_pick"] == on_sqlite.result["final_pick"]
    sqlite_rows = _scores(_settings(tmp_path / "a").database_url)
    assert _scores(postgresql_url) == sqlite_rows
    # 4 candidates x 2 metrics on (3 outer x 3 inner + 3 final inner) folds, plus each outer
    # fold's pick scored on its test part with both metrics
    assert len(sqlite_rows) == 4 * 2 * (3 * 3 + 3) + 3 * 2


def test_a_redelivered_unit_is_skipped_and_adds_no_scores(tmp_path: Path) -> None:
    settings = _settings(tmp_path)
    outcome = run_embedded(_request(), settings=settings, workers=1)
    before = _scores(settings.database_url)
    engine = make_engine(settings.database_url)
    sessions = make_session_factory(engine)
    with sessions() as session:
        unit_id = session.scalars(
            select(WorkUnit.id).where(WorkUnit.job_id == outcome.job_id).limit(1)
        ).one()
    report = execute_unit(sessions, unit_id, settings=settings, worker=worker_name())
    engine.dispose()
    assert report.status == "skipped"
    assert _scores(settings.database_url) == before


def test_a_refused_request_stores_no_job(tmp_path: Path) -> None:
    settings = _settings(tmp_path)
    bad = _request(metrics=["accuracy", "r2"])
    with pytest.raises(BadInput, match=r"metrics\[1\]"):
        run_embedded(bad, settings=settings)
    engine = make_engine(settings.database_url)
    with make_session_factory(engine)() as session:
        assert session.scalar(select(func.count()).select_from(Job)) == 0
    engine.dispose()


def test_a_failing_fit_fails_the_job_with_its_error(tmp_path: Path) -> None:
    # more neighbours than training rows passes the declared constraints but fails in predict
    settings = _settings(tmp_path)
    bad = _request(families=[{"estimator": "KNeighborsClassifier", "fixed": {"n_neighbors": 500}}])
    with pytest.raises(JobFailed, match="n_neighbors"):
        run_embedded(bad, settings=settings, workers=1)
    engine = make_engine(settings.database_url)
    with make_session_factory(engine)() as session:
        job = session.scalars(select(Job)).one()
        statuses = set(session.scalars(select(WorkUnit.status).where(WorkUnit.job_id == job.id)))
    engine.dispose()
    assert job.status == "failed"
    assert job.result is None
    assert "failed" in statuses
    assert "done" not in statuses and "queued" not in statuses


def test_the_stored_result_is_plain_json(tmp_path: Path) -> None:
    settings = _settings(tmp_path)
    outcome = run_embedded(_request(), settings=settings)
    # allow_nan=False: PostgreSQL refuses NaN in JSON, so a result must never carry one
    assert json.loads(json.dumps(outcome.result, allow_nan=False)) == outcome.result
