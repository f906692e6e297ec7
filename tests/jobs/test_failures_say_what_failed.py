"""Failures say what failed: a NaN fold score names metric, candidate and fold and fails the job at
once (embedded on SQLite and PostgreSQL, and over the API); a unit whose worker process died on
every attempt is reported as a crash, not as "gave up"."""

from __future__ import annotations

import math
import re
import time
from datetime import timedelta
from pathlib import Path
from typing import Any

import pytest
from api.server import running_server
from sqlalchemy import select

from service.config import Settings, load_settings
from service.jobs.execution.reconcile import reconcile
from service.jobs.intake.create import create_job
from service.jobs.intake.prepare import prepare_job
from service.jobs.lifecycle import MAX_ATTEMPTS, claim_unit
from service.jobs.local.driver import JobFailed, run_embedded
from service.store.db import make_engine, make_session_factory, upgrade_database, utcnow
from service.store.models import FoldScore, Job, WorkUnit

# six rows: outer 3-fold leaves 4 training rows, inner 4-fold on them leaves 1 test row, where
# R^2 is undefined: scikit-learn's r2_score returns nan with an UndefinedMetricWarning for fewer
# than two samples (sklearn/metrics/_regression.py)
SIX_ROWS = "x,y\n1,1.0\n2,2.1\n3,2.9\n4,4.2\n5,5.1\n6,5.8\n"


def _request(path: Path | str) -> dict[str, Any]:
    return {
        "dataset": {"path": str(path)},
        "target": "y",
        "task": "regression",
        "families": [{"estimator": "Ridge", "grid": {"alpha": [0.1, 1.0]}}],
        "outer": {"method": "kfold", "k": 3, "seed": 0},
        "inner": {"method": "kfold", "k": 4, "seed": 1},
        "metrics": ["r2"],
    }


def _says_what_failed(error: str) -> None:
    assert error.startswith("unit "), error
    # Every candidate fails on a one-row test fold; units run side by side, so whichever fails
    # first names its own candidate and fold.
    assert re.search(r"r2 came out as nan for candidate Ridge \{'alpha': (0\.1|1\.0)\b", error)
    assert re.search(r"on inner fold r0f\d of [^()]+ \(1 test row\)", error), error
    assert "Traceback" not in error and "NOT NULL" not in error and "gave up" not in error


@pytest.mark.parametrize("store", ["sqlite", "postgresql"])
def test_a_nan_fold_score_fails_the_job_at_once_naming_metric_candidate_and_fold(
    tmp_path: Path, store: str, request: pytest.FixtureRequest
) -> None:
    table = tmp_path / "six.csv"
    table.write_text(SIX_ROWS)
    env = {"FOLDWISE_HOME": str(tmp_path / "home")}
    if store == "postgresql":
        env["FOLDWISE_DATABASE_URL"] = request.getfixturevalue("postgresql_url")
    settings = load_settings(env)
    with pytest.raises(JobFailed) as caught:
        run_embedded(_request(table), settings=settings)
    _says_what_failed(str(caught.value))
    engine = make_engine(settings.database_url)
    try:
        with make_session_factory(engine)() as session:
            job = session.scalars(select(Job)).one()
            units = list(session.scalars(select(WorkUnit).where(WorkUnit.job_id == job.id)))
            values = list(session.scalars(select(FoldScore.value)))
    finally:
        engine.dispose()
    assert job.status == "failed" and job.error == str(caught.value)
    failed = [u for u in units if u.status == "failed"]
    assert len(failed) == 1 and failed[0].attempts == 1  # failed on its first attempt, no retry
    assert failed[0].error and "r2 came out as nan" in failed[0].error
    assert not [u for u in units if u.status in ("queued", "running")]
    assert all(math.isfinite(v) for v in values)  # a NaN is never stored


def test_a_nan_fold_score_fails_the_job_over_the_api(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    (data / "six.csv").write_text(SIX_ROWS)
    with (
        running_server(
            tmp_path / "home", tmp_path / "server.log", FOLDWISE_DATA_ROOTS=str(data)
        ) as live,
        live.client(live.token("teamA")) as client,
    ):
        answer = client.post("/v1/jobs", json=_request("six.csv"))
        assert answer.status_code == 202, answer.text
        started = time.monotonic()
        job = live.wait_for_job(client, answer.json()["id"])
        waited = time.monotonic() - started
    assert job["status"] == "failed"
    _says_what_failed(job["error"])
    # at once: not after leases ran out (the lease is the unit time limit plus 30 s)
    assert waited < live.settings.unit_lease.total_seconds()


def _pg_settings(tmp_path: Path, url: str) -> Settings:
    settings = load_settings(
        {"FOLDWISE_HOME": str(tmp_path / "home"), "FOLDWISE_DATABASE_URL": url}
    )
    upgrade_database(settings.database_url)
    return settings


def test_a_unit_whose_process_died_every_time_is_reported_as_a_crash(
    tmp_path: Path, postgresql_url: str
) -> None:
    settings = _pg_settings(tmp_path, postgresql_url)
    sessions = make_session_factory(make_engine(settings.database_url))
    body = {**_request("unused"), "dataset": {"sample": "diabetes"}, "target": "target"}
    with sessions.begin() as session:
        prepared = prepare_job(body, session=session, settings=settings, base_dir=tmp_path)
        job_id = create_job(session, prepared, settings)
    with sessions() as session:
        unit_id = session.scalars(
            select(WorkUnit.id).where(WorkUnit.job_id == job_id).order_by(WorkUnit.id)
        ).first()
    assert unit_id is not None
    for attempt in range(MAX_ATTEMPTS):
        with sessions.begin() as session:
            # each claim is the real conditional update a worker makes before it fits
            assert claim_unit(session, unit_id, f"w{attempt}@host:{100 + attempt}", timedelta(1))
        with sessions.begin() as session:
            # the process died holding the claim: what the store shows once its lease has run
            # out (the time passing is written, not waited for; the lease itself is unchanged)
            session.get_one(WorkUnit, unit_id).lease_until = utcnow() - timedelta(seconds=1)
    found = reconcile(sessions, settings)
    assert found.abandoned == [unit_id]
    with sessions() as session:
        job = session.get_one(Job, job_id)
        unit = session.get_one(WorkUnit, unit_id)
        open_units = session.scalars(
            select(WorkUnit.id).where(WorkUnit.job_id == job_id, WorkUnit.status == "queued")
        ).all()
    assert job.status == "failed" and unit.status == "failed"
    assert job.error == unit.error
    assert job.error is not None
    assert job.error.startswith(f"the worker process running unit {unit_id} (inner r0f0) died 3 ")
    assert "(killed, out of memory, or stopped at the hard time limit" in job.error
    assert "last on w2@host:102" in job.error and "gave up" not in job.error
    assert list(open_units) == []  # the job cannot succeed: nothing else is started for it
    sessions.kw["bind"].dispose()
