"""A cancel that races a failing unit ends the job once: failed or cancelled, one webhook notice.

The cancel is decided by a conditional UPDATE in the store, not by the row it loaded: a cancel
whose job row was read while the job was live, but which writes after a unit failed the job,
changes nothing and queues no notice. On PostgreSQL the race is also run for real: the failing
transaction holds the job's row while the cancel's UPDATE waits on it in another thread; and a
cancel meets the first claim of a queued job half-way, without a deadlock.
"""

from __future__ import annotations

import threading
import time
import uuid
from datetime import timedelta
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import Engine, func, select
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings, load_settings
from service.jobs.intake.create import create_job
from service.jobs.intake.prepare import prepare_job
from service.jobs.lifecycle import (
    cancel_job,
    claim_statement,
    fail_job,
    queued_unit_ids,
    start_job,
)
from service.store.db import make_engine, make_session_factory, upgrade_database
from service.store.followup_models import WebhookDelivery
from service.store.models import Job, WorkUnit

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


def test_a_cancel_racing_the_first_claim_of_a_queued_job_deadlocks_nothing(
    tmp_path: Path, postgresql_url: str
) -> None:
    """The first claim of a queued job locks its units, then the job's row (to start it); a cancel
    arriving between the two used to lock the row first and then wait on those units, and
    PostgreSQL aborted one of the two as a deadlock (the API answered the cancel with a 500).
    Both now finish: the claim's units run on (they stop between fits), the rest are cancelled."""
    settings = load_settings(
        {"FOLDWISE_HOME": str(tmp_path / "home"), "FOLDWISE_DATABASE_URL": postgresql_url}
    )
    upgrade_database(settings.database_url)
    engine = make_engine(settings.database_url)
    try:
        sessions = make_session_factory(engine)
        job_id = _live_job(sessions, settings)
        with sessions() as session:
            queued = queued_unit_ids(session, job_id)
        assert len(queued) >= 2
        claimed_ids, rest = queued[:1], queued[1:]
        outcome: dict[str, Any] = {}
        loaded = threading.Event()

        def cancel() -> None:
            try:
                with sessions() as canceller:
                    job = canceller.get_one(Job, job_id)
                    loaded.set()
                    outcome["returned"] = cancel_job(canceller, job).status
                    canceller.commit()
            except Exception as error:  # the test shows what the store raised
                outcome["error"] = repr(error)

        claimer = sessions()
        try:
            claimer.begin()
            token = uuid.uuid4().hex
            taken = claimer.execute(
                claim_statement(claimed_ids, "worker-a", timedelta(seconds=60), token)
            )
            assert taken.rowcount == 1  # type: ignore[attr-defined]
            thread = threading.Thread(target=cancel)
            thread.start()
            assert loaded.wait(10)
            time.sleep(1.0)  # the cancel is now waiting on the claimed unit's lock
            assert thread.is_alive(), "the cancel did not wait for the claim"
            start_job(claimer, job_id)  # the claim's second step: the job's row
            claimer.commit()
        finally:
            claimer.close()
        thread.join(timeout=30)
        assert outcome == {"returned": "cancelled"}
        with sessions() as session:
            statuses = {u.id: u.status for u in session.scalars(select(WorkUnit))}
        assert [statuses[i] for i in claimed_ids] == ["running"]
        assert {statuses[i] for i in rest} == {"cancelled"}
        assert _ended(sessions, job_id) == ("cancelled", None, 1)
    finally:
        engine.dispose()
