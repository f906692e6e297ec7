"""One rule for a job that can no longer succeed, whichever path ends it.

A unit can end its job two ways: its fit fails in a worker (`run_and_advance`, what a Celery task
and the local pool call), or its process dies on every attempt and the reconciler gives up on it
(`reconcile`). Both must leave the job, its other units, its webhook notice and (for a learning
curve) the parent and the other sizes in the same states, on SQLite and on PostgreSQL.

The failing fit is real: R^2 on a one-row test fold is undefined, and scikit-learn's r2_score
returns nan for fewer than two samples (sklearn/metrics/_regression.py), which a unit refuses.
The dead process is written as the store shows it once a lease ran out (the lease is not
shortened: the time passing is written, not waited for).
"""

from __future__ import annotations

from datetime import timedelta
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import select
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings, load_settings
from service.jobs.curves.prepare import create_submission, prepare_submission
from service.jobs.curves.settle import child_ids
from service.jobs.execution.reconcile import reconcile
from service.jobs.execution.work import run_and_advance
from service.jobs.intake.start import start_submitted
from service.jobs.lifecycle import MAX_ATTEMPTS, claim_unit
from service.store.db import make_engine, make_session_factory, upgrade_database, utcnow
from service.store.models import Job, WebhookDelivery, WorkUnit
from service.store.statuses import JobStatus, UnitStatus

# twelve rows: outer 3-fold leaves 8 training rows. Inner 4-fold on all 8 leaves 2 test rows
# (R^2 defined); on half of them (a learning curve's size 0.5) 4 rows leave 1 test row (nan).
TWELVE_ROWS = "x,y\n" + "".join(f"{i},{i * 1.1 + (i % 3) * 0.2:.2f}\n" for i in range(1, 13))
HOOK = "https://hooks.example.test/foldwise"


def _request(table: Path, *, inner_k: int, curve: bool) -> dict[str, Any]:
    body: dict[str, Any] = {
        "dataset": {"path": str(table)},
        "target": "y",
        "task": "regression",
        "families": [{"estimator": "Ridge", "grid": {"alpha": [0.1, 1.0, 10.0]}}],
        "outer": {"method": "kfold", "k": 3, "seed": 0},
        "inner": {"method": "kfold", "k": inner_k, "seed": 1},
        "metrics": ["r2"],
        "reuse": False,
    }
    if curve:
        body |= {"kind": "learning_curve", "sizes": [0.5, 1.0]}
    return body


def _settings(tmp_path: Path, store: str, request: pytest.FixtureRequest) -> Settings:
    env = {"FOLDWISE_HOME": str(tmp_path / "home")}
    if store == "postgresql":
        env["FOLDWISE_DATABASE_URL"] = request.getfixturevalue("postgresql_url")
    settings = load_settings(env)
    upgrade_database(settings.database_url)
    return settings


def _submit(sessions: sessionmaker[Session], settings: Settings, body: dict[str, Any]) -> str:
    """Store and start the job as every submitter does; the job (or curve) names a webhook."""
    with sessions.begin() as session:
        prepared = prepare_submission(
            body, session=session, settings=settings, base_dir=settings.home
        )
        job_id = create_submission(session, prepared, settings)
        session.get_one(Job, job_id).webhook_url = HOOK
    start_submitted(sessions, job_id, settings)
    return job_id


def _doomed_unit(sessions: sessionmaker[Session], job_id: str) -> tuple[str, int]:
    """The first unit of the job, or of a curve's smallest size: (its job, its id)."""
    with sessions() as session:
        target = (child_ids(session, job_id) or [job_id])[0]
        unit_id = session.scalars(
            select(WorkUnit.id).where(WorkUnit.job_id == target).order_by(WorkUnit.id)
        ).first()
    assert unit_id is not None
    return target, unit_id


def _fail_in_worker(sessions: sessionmaker[Session], settings: Settings, unit_id: int) -> None:
    report, added = run_and_advance(sessions, unit_id, settings=settings, worker="w@host:1")
    assert (report.status, added) == (UnitStatus.FAILED, [])


def _give_up_in_reconciler(
    sessions: sessionmaker[Session], settings: Settings, unit_id: int
) -> None:
    for attempt in range(MAX_ATTEMPTS):
        with sessions.begin() as session:
            # the real conditional update a worker makes before it fits
            assert claim_unit(session, unit_id, f"w@host:{attempt}", settings.unit_lease)
        with sessions.begin() as session:
            session.get_one(WorkUnit, unit_id).lease_until = utcnow() - timedelta(seconds=1)
    assert reconcile(sessions, settings).abandoned == [unit_id]


def _states(sessions: sessionmaker[Session], job_id: str, failed_unit: int) -> dict[str, Any]:
    """Everything the rule decides, with ids replaced by roles so two runs compare equal."""
    with sessions() as session:
        jobs = [job_id, *child_ids(session, job_id)]
        states: dict[str, Any] = {}
        for position, one in enumerate(jobs):
            job = session.get_one(Job, one)
            units = session.scalars(
                select(WorkUnit).where(WorkUnit.job_id == one).order_by(WorkUnit.id)
            ).all()
            states[f"job{position}"] = {
                "status": job.status,
                "ended": job.finished_at is not None,
                "has_error": bool(job.error),
                "notices": len(
                    session.scalars(
                        select(WebhookDelivery.id).where(WebhookDelivery.job_id == one)
                    ).all()
                ),
                "units": sorted(
                    ("the failed one" if u.id == failed_unit else "other", u.status) for u in units
                ),
            }
    return states


@pytest.mark.parametrize("curve", [False, True], ids=["job", "learning-curve"])
@pytest.mark.parametrize("store", ["sqlite", "postgresql"])
def test_a_unit_given_up_on_and_a_unit_failing_in_a_worker_leave_the_same_states(
    tmp_path: Path, store: str, curve: bool, request: pytest.FixtureRequest
) -> None:
    table = tmp_path / "twelve.csv"
    table.write_text(TWELVE_ROWS)
    # a plain job fails at inner k=8 (one test row); a curve's size 0.5 fails at inner k=4
    body = _request(table, inner_k=4 if curve else 8, curve=curve)
    settings = _settings(tmp_path, store, request)
    engine = make_engine(settings.database_url)
    sessions = make_session_factory(engine)
    try:
        seen = {}
        for path, end in (("worker", _fail_in_worker), ("reconciler", _give_up_in_reconciler)):
            job_id = _submit(sessions, settings, body)
            failing_job, unit_id = _doomed_unit(sessions, job_id)
            end(sessions, settings, unit_id)
            seen[path] = _states(sessions, job_id, unit_id)
            with sessions() as session:
                assert session.get_one(WorkUnit, unit_id).status == UnitStatus.FAILED
                assert session.get_one(Job, failing_job).status == JobStatus.FAILED
    finally:
        engine.dispose()
    assert seen["worker"] == seen["reconciler"]
    # and the states are the rule's, not merely equal: nothing of the job waits to run
    states = seen["worker"]
    top = states["job0"]
    assert top["status"] == JobStatus.FAILED and top["ended"] and top["has_error"]
    assert top["notices"] == 1  # the job's (or curve's) own webhook, exactly once
    for one in states.values():
        assert all(status != UnitStatus.QUEUED for _, status in one["units"]), one
        assert one["status"] in (JobStatus.FAILED, JobStatus.CANCELLED), one
    if curve:  # the failing size failed; the other size was cancelled with its units
        assert states["job1"]["status"] == JobStatus.FAILED
        assert states["job2"]["status"] == JobStatus.CANCELLED
        assert {s for _, s in states["job2"]["units"]} == {UnitStatus.CANCELLED}
    else:
        assert ("the failed one", UnitStatus.FAILED) in top["units"]
        assert {s for _, s in top["units"]} == {UnitStatus.FAILED, UnitStatus.CANCELLED}
