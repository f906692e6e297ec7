"""The `nested` interval as stored work units (issue 11): embedded pool, SQLite and PostgreSQL.

The reference is the in-process driver service/cv/nested_interval_run.py: it fits whole pipelines
afresh and calls predict() on the partitions of Bates, Hastie & Tibshirani (2024, Algorithm 1), and
tests/engine/test_intervals.py holds its losses to scikit-learn's cross_val_predict on the same
partitions. The stored run computes its losses from the predictions its refit units stored, after
the units ran on the pool; the two must agree to 1e-12.
"""

from __future__ import annotations

import copy
import threading
import time
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import func, select
from threadpoolctl import threadpool_limits

from service.config import Settings, load_settings
from service.cv.nested_interval_run import run_nested_interval
from service.cv.scopes import INTERVAL_REPEAT_BASE
from service.jobs.lifecycle import cancel_job
from service.jobs.local.driver import JobFailed, run_embedded
from service.store.db import make_engine, make_session_factory, upgrade_database
from service.store.models import Job, WorkUnit

from .runs import plan_for

# iris ships with scikit-learn (Fisher 1936): 3 outer x 3 inner folds, two candidates, R = 2
QUICK: dict[str, Any] = {
    "dataset": {"sample": "iris"},
    "target": "target",
    "task": "classification",
    "families": [
        {"estimator": "LogisticRegression", "fixed": {"max_iter": 500}, "grid": {"C": [0.1, 1.0]}}
    ],
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
    "metrics": ["accuracy", "roc_auc_ovr"],
}
NESTED = {**copy.deepcopy(QUICK), "interval": {"method": "nested", "repetitions": 2}}
# the driver's fits: R·K·K procedures, each 2 candidates x 3 inner folds and one refit
INTERVAL_FITS = 2 * 3 * 3 * (2 * 3 + 1)
ESTIMATE_FITS = 3 * (2 * 3 + 1) + (2 * 3 + 1)


@pytest.fixture(scope="module")
def store(module_store: Settings) -> Settings:
    """This module's store, SQLite then PostgreSQL (tests/engine/conftest.py)."""
    return module_store


@pytest.fixture(scope="module")
def runs(store: Settings) -> dict[str, dict[str, Any]]:
    """quick, then nested, then nested again, on one store, as three requests in a row."""
    with threadpool_limits(1):  # one BLAS thread, as the pool children use
        return {
            name: run_embedded(body, settings=store, workers=2, base_dir=Path.cwd()).result
            for name, body in (("quick", QUICK), ("nested", NESTED), ("again", NESTED))
        }


def test_the_stored_interval_equals_the_engine_alone_driver(runs: dict[str, Any]) -> None:
    with threadpool_limits(1):
        # the same seed the service draws its partitions with: the outer seed, + r per repetition
        reference = run_nested_interval(plan_for(NESTED), repetitions=2, seed=0)
    stored = runs["nested"]["estimate"]["accuracy"]["interval"]
    assert stored["method"] == "nested" and stored["repetitions"] == 2
    loss = stored["loss"]
    assert loss["err_ncv"] == pytest.approx(reference.loss.err_ncv, abs=1e-12)
    assert loss["err_cv"] == pytest.approx(reference.loss.err_cv, abs=1e-12)
    assert stored["se"] == pytest.approx(reference.loss.se, abs=1e-12)
    assert stored["point"] == pytest.approx(reference.point, abs=1e-12)
    assert loss["lower"] == pytest.approx(reference.loss.lower, abs=1e-12)
    assert loss["upper"] == pytest.approx(reference.loss.upper, abs=1e-12)
    assert stored["lower"] == pytest.approx(max(0.0, reference.lower), abs=1e-12)
    assert stored["upper"] == pytest.approx(min(1.0, reference.upper), abs=1e-12)
    # roc_auc is not a mean of per-row losses: no number that looks like an interval
    assert runs["nested"]["estimate"]["roc_auc_ovr"]["interval"] is None
    assert any("No nested interval for roc_auc_ovr" in c for c in runs["nested"]["cautions"])
    # the procedures' fits are the driver's, computed here, taken from the store, or shared
    # with the job's own outer folds: repetition 0 draws the outer partition (same seed), so its
    # K = 3 procedures fitted without one part are the outer folds, 2 x 3 + 1 fits each
    interval = runs["nested"]["work"]["by_purpose"]["interval"]
    assert interval["fits_shared"] == 3 * (2 * 3 + 1)
    found = interval["fits"] + interval["fits_reused"] + interval["fits_shared"]
    assert found == reference.fits == INTERVAL_FITS


def test_a_request_differing_only_in_interval_reuses_every_estimate_fit(
    runs: dict[str, Any],
) -> None:
    quick, nested = runs["quick"], runs["nested"]
    estimate = nested["work"]["by_purpose"]["estimate"]
    assert estimate["fits"] == 0 and estimate["units_reused"] == estimate["units"]
    assert estimate["fits_reused"] == ESTIMATE_FITS
    assert quick["work"]["by_purpose"]["estimate"]["fits"] == ESTIMATE_FITS
    assert quick["work"]["by_purpose"]["interval"]["units"] == 0
    assert nested["outer"] == quick["outer"] and nested["final_pick"] == quick["final_pick"]
    # the quick interval's estimate is unchanged; only the interval differs
    assert nested["estimate"]["accuracy"]["mean"] == quick["estimate"]["accuracy"]["mean"]


def test_the_same_request_twice_gives_identical_intervals_from_the_store(
    runs: dict[str, Any],
) -> None:
    first, again = runs["nested"], runs["again"]
    assert again["work"]["units_computed"] == 0
    for purpose in ("estimate", "interval"):
        counts = again["work"]["by_purpose"][purpose]
        assert counts["fits"] == 0 and counts["units_reused"] == counts["units"]
    for metric in NESTED["metrics"]:
        assert again["estimate"][metric]["interval"] == first["estimate"][metric]["interval"]


def test_cancel_mid_interval_stops_the_procedure_units(tmp_path: Path) -> None:
    settings = load_settings({"FOLDWISE_HOME": str(tmp_path / "home")})
    body = {**copy.deepcopy(NESTED), "reuse": False}
    body["interval"]["repetitions"] = 6  # long enough to be caught mid-way
    outcome: dict[str, BaseException] = {}

    def run() -> None:
        try:
            run_embedded(body, settings=settings, workers=2, base_dir=Path.cwd())
        except BaseException as exc:  # handed to the test's thread
            outcome["error"] = exc

    # the store exists before the job thread starts, so the watcher below never reads a store
    # that is still being made (the driver leaves a current store alone)
    upgrade_database(settings.database_url)
    runner = threading.Thread(target=run)
    runner.start()
    engine = make_engine(settings.database_url)
    sessions = make_session_factory(engine)
    interval_unit = WorkUnit.outer_repeat >= INTERVAL_REPEAT_BASE
    deadline = time.monotonic() + 120
    job_id = None
    while time.monotonic() < deadline:
        with sessions() as session:
            done = session.execute(
                select(WorkUnit.job_id, func.count())
                .where(interval_unit, WorkUnit.status == "done")
                .group_by(WorkUnit.job_id)
            ).first()
        if done and done[1] >= 5:
            job_id = done[0]
            break
        time.sleep(0.2)
    assert job_id is not None, "no interval unit finished within two minutes"
    with sessions.begin() as session:
        cancel_job(session, session.get_one(Job, job_id))
    runner.join(180)  # fits already started finish first; a loaded machine is slow at that
    assert not runner.is_alive()
    assert isinstance(outcome.get("error"), JobFailed)
    with sessions() as session:
        job = session.get_one(Job, job_id)
        states = dict(
            session.execute(
                select(WorkUnit.status, func.count())
                .where(WorkUnit.job_id == job_id)
                .group_by(WorkUnit.status)
            ).all()
        )
    engine.dispose()
    assert job.status == "cancelled" and job.result is None
    assert states.get("running", 0) == 0 and states.get("queued", 0) == 0
    assert states.get("done", 0) < job.units_total
