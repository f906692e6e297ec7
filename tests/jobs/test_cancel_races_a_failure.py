"""A cancel that races a failing unit ends the job once: failed or cancelled, one webhook notice.

The cancel is decided by a conditional UPDATE in the store, not by the row it loaded: a cancel
whose job row was read while the job was live, but which writes after a unit failed the job,
changes nothing and queues no notice. On PostgreSQL the race is also run for real: the failing
transaction holds the job's row while the cancel's UPDATE waits on it in another thread.
"""

from __future__ import annotations

import threading
import time
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import Engine, func, select
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings, load_settings
from service.jobs.intake.create import create_job
from service.jobs.intake.prepare import prepare_job
from service.jobs.lifecycle import cancel_job, fail_job
from service.store.db import make_engine, make_session_factory, upgrade_database
from service.store.followup_models import WebhookDelivery
from service.store.models import Job

REQUEST: dict[str, Any] = {
    "dataset": {"sample": "diabetes"},
    "target": "target",
    "task": "regression",
    "families": [{"estimator": "Ridge", "grid": {"alpha": [1.0]}}],
    "outer": {"method": "kfold", "k": 3, "seed": 0},
    "inner": {"method": "kfold", "k": 3, "seed": 1},
    "metrics": ["r2"],
    "reuse": False,
}
HOOK = "https://hooks.example.test/foldwise"


@pytest.fixture(params=["sqlite", "postgresql"])
def store(tmp_path: Path, request: pytest.FixtureRequest) -> tuple[Settings, Engine]:
    env = {"FOLDWISE_HOME": str(tmp_path / "home")}
    if request.param == "postgresql":
        env["FOLDWISE_DATABASE_URL"] = request.getfixturevalue("postgresql_url")
    settings = load_settings(env)
    upgrade_database(settings.database_url)
    engine = make_engine(settings.database_url)
    request.addfinalizer(engine.dispose)
    return settings, engine


def _live_job(sessions: sessionmaker[Session], settings: Settings) -> str:
    with sessions.begin() as session:
        prepared = prepare_job(REQUEST, session=session, settings=settings, base_dir=Path.cwd())
        job_id = create_job(session, prepared, settings)
        session.get_one(Job, job_id).webhook_url = HOOK
    return job_id


def _ended(sessions: sessionmaker[Session], job_id: str) -> tuple[str, str | None, int]:
    """(status, error, notices queued) as stored now."""
    with sessions() as session:
        job = session.get_one(Job, job_id)
        notices = session.scalar(select(func.count()).where(WebhookDelivery.job_id == job_id))
        return job.status, job.error, int(notices or 0)


def test_a_cancel_that_read_a_live_row_after_a_failure_changes_nothing(
    store: tuple[Settings, Engine],
) -> None:
    settings, engine = store
    sessions = make_session_factory(engine)
    job_id = _live_job(sessions, settings)
    with sessions() as canceller:
        stale = canceller.get_one(Job, job_id)  # read while the job was still live
        assert stale.status == "queued"
        # the read's transaction ends (SQLite's would hold the write lock); the row stays loaded
        canceller.commit()
        with sessions.begin() as worker:
            assert fail_job(worker, job_id, "unit 1 failed: boom")
        returned = cancel_job(canceller, stale)
        canceller.commit()
    assert returned.status == "failed"  # the caller is shown what the store holds
    assert _ended(sessions, job_id) == ("failed", "unit 1 failed: boom", 1)


def test_a_failure_after_a_cancel_changes_nothing(store: tuple[Settings, Engine]) -> None:
    settings, engine = store
    sessions = make_session_factory(engine)
    job_id = _live_job(sessions, settings)
    with sessions.begin() as canceller:
        cancel_job(canceller, canceller.get_one(Job, job_id))
    with sessions.begin() as worker:
        assert not fail_job(worker, job_id, "unit 1 failed: boom")
    assert _ended(sessions, job_id) == ("cancelled", None, 1)


def test_a_cancel_waiting_on_a_failing_transaction_sees_the_failure(
    tmp_path: Path, postgresql_url: str
) -> None:
    settings = load_settings(
        {"FOLDWISE_HOME": str(tmp_path / "home"), "FOLDWISE_DATABASE_URL": postgresql_url}
    )
    upgrade_database(settings.database_url)
    engine = make_engine(settings.database_url)
    try:
        sessions = make_session_factory(engine)
        job_id = _live_job(sessions, settings)
        outcome: dict[str, Any] = {}
        loaded = threading.Event()

        def cancel() -> None:
            with sessions() as canceller:
                job = canceller.get_one(Job, job_id)
                loaded.set()
                # blocks on the failing transaction's row lock, then re-checks the status
                outcome["returned"] = cancel_job(canceller, job).status
                canceller.commit()

        worker = sessions()
        try:
            worker.begin()
            assert fail_job(worker, job_id, "unit 1 failed: boom")  # holds the job's row now
            thread = threading.Thread(target=cancel)
            thread.start()
            assert loaded.wait(10)
            time.sleep(1.0)  # the cancel's UPDATE is now waiting on the row
            assert thread.is_alive(), "the cancel did not wait for the failing transaction"
            worker.commit()
        finally:
            worker.close()
        thread.join(timeout=30)
        assert outcome == {"returned": "failed"}
        assert _ended(sessions, job_id) == ("failed", "unit 1 failed: boom", 1)
    finally:
        engine.dispose()
