"""Leases kept alive by their holder, and records fenced on the claim, on SQLite and PostgreSQL.

At default settings (no lease or heartbeat variable is set here, so each test waits out a real
lease): a holder whose heartbeat thread renews keeps its unit past the lease; once it stops
renewing, another worker claims the unit after one lease; the silent copy then records nothing,
whether it records before, after or at the same moment as the new holder, and its next renewal
or check between fits tells it to stop. Each fold score is counted once.
"""

from __future__ import annotations

import threading
import time
from concurrent.futures import ThreadPoolExecutor
from datetime import timedelta
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings, load_settings
from service.cv.units import UnitRef, fit_and_score
from service.errors import BadInput
from service.jobs.execution.execute import LOST, record_claimed, run_claimed
from service.jobs.execution.heartbeat import Heartbeat
from service.jobs.execution.plans import plan_for_job
from service.jobs.intake.create import create_job
from service.jobs.intake.prepare import prepare_job
from service.jobs.lifecycle import ClaimLost, claim_unit
from service.store.db import make_engine, make_session_factory, upgrade_database
from service.store.models import FoldScore, Job, WorkUnit

REQUEST: dict[str, Any] = {
    "dataset": {"sample": "diabetes"},
    "target": "target",
    "task": "regression",
    "families": [{"estimator": "Ridge", "grid": {"alpha": [0.1, 1.0]}}],
    "outer": {"method": "kfold", "k": 3, "seed": 0},
    "inner": {"method": "kfold", "k": 3, "seed": 1},
    "metrics": ["r2"],
    "reuse": False,
}
HOLDER, TAKER = "a@host:1", "b@host:2"


def _store(tmp_path: Path, store: str, request: pytest.FixtureRequest) -> Settings:
    env = {"FOLDWISE_HOME": str(tmp_path / "home")}  # lease and heartbeat left at defaults
    if store == "postgresql":
        env["FOLDWISE_DATABASE_URL"] = request.getfixturevalue("postgresql_url")
    settings = load_settings(env)
    upgrade_database(settings.database_url)
    return settings


def _first_unit(sessions: sessionmaker[Session], settings: Settings) -> tuple[str, int]:
    with sessions.begin() as session:
        prepared = prepare_job(REQUEST, session=session, settings=settings, base_dir=Path.cwd())
        job_id = create_job(session, prepared, settings)
    with sessions() as session:
        unit_id = session.scalars(
            select(WorkUnit.id).where(WorkUnit.job_id == job_id).order_by(WorkUnit.id)
        ).first()
    assert unit_id is not None
    return job_id, unit_id


def _claim(sessions: sessionmaker[Session], unit_id: int, worker: str, s: Settings) -> str | None:
    with sessions.begin() as session:
        return claim_unit(session, unit_id, worker, s.unit_lease)


def _counted(sessions: sessionmaker[Session], job_id: str) -> tuple[int, int, set[str]]:
    """(fold-score rows, job.units_done, workers on the scores) as stored now."""
    with sessions() as session:
        rows = session.scalar(select(func.count()).where(FoldScore.job_id == job_id)) or 0
        workers = set(session.scalars(select(FoldScore.worker).where(FoldScore.job_id == job_id)))
        return int(rows), session.get_one(Job, job_id).units_done, workers


@pytest.mark.slow
def test_a_silent_holder_loses_its_unit_after_one_lease_and_records_nothing(
    tmp_path: Path, request: pytest.FixtureRequest
) -> None:
    # both stores at once, each in its own home and database: each run waits out two real
    # leases, mostly asleep, so side by side they take the time of one
    stores = ("sqlite", "postgresql")
    settings = {store: _store(tmp_path / store, store, request) for store in stores}
    with ThreadPoolExecutor(len(stores)) as pool:
        runs = [pool.submit(_silent_holder, settings[store], store) for store in stores]
        for run in runs:
            run.result()  # a failed assertion in either run fails the test with its message


def _silent_holder(settings: Settings, store: str) -> None:
    lease, every = settings.lease_seconds, settings.heartbeat_seconds
    engine = make_engine(settings.database_url)
    sessions = make_session_factory(engine)
    try:
        job_id, unit_id = _first_unit(sessions, settings)
        token_a = _claim(sessions, unit_id, HOLDER, settings)
        assert token_a is not None

        # the holder renews from its heartbeat thread for longer than a lease; the other worker
        # keeps trying and never gets the unit
        with Heartbeat(sessions, unit_id, token_a, settings) as beat:
            started = time.monotonic()
            while time.monotonic() - started < lease + every:
                assert _claim(sessions, unit_id, TAKER, settings) is None
                time.sleep(1)
            assert not beat.lost() and beat.renewals >= int(lease // every)
            silent_from = beat.renewed_at

        # the holder goes silent (hung, partitioned, or killed): claimable after one lease
        while (token_b := _claim(sessions, unit_id, TAKER, settings)) is None:
            assert time.monotonic() - silent_from < lease + 5, "still held long after its lease"
            time.sleep(0.25)
        lapsed = time.monotonic() - silent_from
        print(f"\n[{store}] claimed again {lapsed:.1f} s after the last renewal, lease {lease:g} s")
        assert lapsed >= lease - 1  # not before the lease the holder last set had run out

        with sessions() as session:
            unit = session.get_one(WorkUnit, unit_id)
            ref = UnitRef(unit.kind, unit.scope, unit.candidate_key)  # type: ignore[arg-type]
            assert unit.attempts == 2 and unit.worker == TAKER
            loaded = plan_for_job(session, job_id, settings)
        outcome = fit_and_score(loaded.plan, ref)

        # the silent copy finished its fit: its record transaction commits nothing at all
        with pytest.raises(ClaimLost):
            record_claimed(sessions, unit_id, token_a, outcome, loaded, settings, HOLDER)
        assert _counted(sessions, job_id) == (0, 0, set())
        # its next renewal finds the claim taken over, and its next check between fits stops it
        with Heartbeat(sessions, unit_id, token_a, settings) as late:
            deadline = time.monotonic() + every + 5
            while not late.lost():
                assert time.monotonic() < deadline, "a taken-over claim was not noticed"
                time.sleep(0.2)
            assert time.monotonic() - late.renewed_at < lease  # lost by takeover, not by time
            report = run_claimed(sessions, unit_id, token_a, job_id, ref, late, settings, HOLDER)
        assert report.status == LOST
        assert _counted(sessions, job_id) == (0, 0, set())

        # both copies record at the same moment: only the current claim counts
        barrier = threading.Barrier(2)
        ends: dict[str, str] = {}

        def record(name: str, token: str) -> None:
            barrier.wait()
            try:
                record_claimed(sessions, unit_id, token, outcome, loaded, settings, name)
                ends[name] = "recorded"
            except ClaimLost:
                ends[name] = "fenced"

        copies = [
            threading.Thread(target=record, args=(HOLDER, token_a)),
            threading.Thread(target=record, args=(TAKER, token_b)),
        ]
        for copy in copies:
            copy.start()
        for copy in copies:
            copy.join(timeout=60)
        assert ends == {HOLDER: "fenced", TAKER: "recorded"}
        # three inner folds, one metric: each score once, by the current holder, counted once
        assert _counted(sessions, job_id) == (3, 1, {TAKER})
        with pytest.raises(ClaimLost):  # and a late copy after that adds nothing either
            record_claimed(sessions, unit_id, token_a, outcome, loaded, settings, HOLDER)
        assert _counted(sessions, job_id) == (3, 1, {TAKER})
    finally:
        engine.dispose()


def test_the_lease_does_not_grow_with_the_time_limit_and_must_outlast_two_heartbeats(
    tmp_path: Path,
) -> None:
    home = {"FOLDWISE_HOME": str(tmp_path)}
    short, long = (
        load_settings({**home, "FOLDWISE_UNIT_TIME_LIMIT": limit}) for limit in ("60", "30000")
    )
    # the documented defaults (README's configuration table), whatever the unit time limit
    assert short.unit_lease == long.unit_lease == timedelta(seconds=40)
    assert short.heartbeat_seconds == long.heartbeat_seconds == 10
    with pytest.raises(BadInput, match="FOLDWISE_HEARTBEAT_SECONDS: must be at most half"):
        load_settings({**home, "FOLDWISE_UNIT_LEASE": "30", "FOLDWISE_HEARTBEAT_SECONDS": "20"})


@pytest.mark.slow
def test_a_holder_that_cannot_reach_the_store_gives_up_before_its_lease_ends(
    tmp_path: Path, request: pytest.FixtureRequest
) -> None:
    settings = _store(tmp_path, "postgresql", request)
    lease, every = settings.lease_seconds, settings.heartbeat_seconds
    engine = make_engine(settings.database_url)
    # the holder's renewals go to a port where no database listens: a real refused connection,
    # as a worker cut off from PostgreSQL sees it
    cut_off = make_engine("postgresql+psycopg://postgres@127.0.0.1:9/unreachable")
    sessions = make_session_factory(engine)
    try:
        job_id, unit_id = _first_unit(sessions, settings)
        token = _claim(sessions, unit_id, HOLDER, settings)
        assert token is not None
        with sessions() as session:
            unit = session.get_one(WorkUnit, unit_id)
            ref = UnitRef(unit.kind, unit.scope, unit.candidate_key)  # type: ignore[arg-type]
        with Heartbeat(make_session_factory(cut_off), unit_id, token, settings) as beat:
            started = time.monotonic()
            while not beat.lost():
                assert time.monotonic() - started < lease, "still holding past its lease"
                time.sleep(0.5)
            gave_up = time.monotonic() - started
            print(f"\ngave up {gave_up:.1f} s after its last renewal (lease {lease:g} s)")
            assert gave_up >= lease - every - 1 and beat.renewals == 0
            # it stops at its first check between fits and writes nothing, though the unit is
            # still its own in the store (nobody has taken it yet)
            report = run_claimed(sessions, unit_id, token, job_id, ref, beat, settings, HOLDER)
        assert report.status == LOST
        assert _counted(sessions, job_id) == (0, 0, set())
        with sessions() as session:
            unit = session.get_one(WorkUnit, unit_id)
            assert (unit.status, unit.claim_token) == ("running", token)
        # and the unit is another worker's once the lease it last set runs out
        while (taken := _claim(sessions, unit_id, TAKER, settings)) is None:
            assert time.monotonic() - started < lease + 5, "not claimable after its lease"
            time.sleep(0.25)
        assert taken != token
    finally:
        engine.dispose()
        cut_off.dispose()
