"""Successive halving as stored work units, round by round: embedded pool, SQLite and PostgreSQL.

scikit-learn is the reference: a HalvingGridSearchCV (resource="n_samples") inside
cross_validate, on load_wine (a table that ships with scikit-learn), with the same splits and
seeds (tests/engine/test_halving.py builds it from scikit-learn alone). The job runs on the
embedded pool as `foldwise select` runs it: each round's candidates are units, stored with their
round; the fan-in adds the next round's units for the candidates the race keeps.
"""

from __future__ import annotations

import copy
from collections import Counter
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import select
from threadpoolctl import threadpool_limits

from service.config import Settings
from service.jobs.execution.run_batch import run_batch_and_advance
from service.jobs.intake.create import create_job
from service.jobs.intake.prepare import prepare_job
from service.jobs.local.driver import run_embedded
from service.store.db import make_engine, make_session_factory, upgrade_database
from service.store.models import FoldScore, Job, WorkUnit

from .test_halving import CASES, check_against_reference, reference

TOLERANCE = 1e-9
# load_wine: three classes, 9 candidates raced 9 -> 3 -> 1 in each of 6 searches (5 outer, all)
CASE = "wine-three-classes"


@pytest.fixture(scope="module")
def store(module_store: Settings) -> Settings:
    """This module's store, SQLite then PostgreSQL (tests/engine/conftest.py)."""
    return module_store


@pytest.fixture(scope="module")
def runs(store: Settings) -> dict[str, tuple[str, dict[str, Any]]]:
    """The halving job, then the same request again, on one store: (job id, result) each."""
    body = CASES[CASE].request()
    found = {}
    with threadpool_limits(1):  # one BLAS thread, as the pool children use
        for name in ("first", "again"):
            ran = run_embedded(copy.deepcopy(body), settings=store, workers=2, base_dir=Path.cwd())
            found[name] = (ran.job_id, ran.result)
    return found


def test_the_stored_rounds_equal_halving_search_inside_cross_validate(
    runs: dict[str, tuple[str, dict[str, Any]]],
) -> None:
    case = CASES[CASE]
    _, result = runs["first"]
    check_against_reference(result, CASE)  # scikit-learn's HalvingGridSearchCV
    # the fits the job made are the ones its search block counts, fewer rows than the full grid
    refits = case.outer + 1
    assert result["search"]["fits"] == result["work"]["fits"]
    assert result["search"]["full_grid_fits"] == (case.outer + 1) * case.inner * 9 + refits
    assert result["search"]["inner_train_rows"] < result["search"]["full_grid_inner_train_rows"]


def test_each_round_is_a_unit_per_candidate_kept_with_its_scores(
    store: Settings, runs: dict[str, tuple[str, dict[str, Any]]]
) -> None:
    job_id, result = runs["first"]
    _, searches, final = reference(CASE)
    engine = make_engine(store.database_url)
    try:
        with make_session_factory(engine)() as session:
            units = session.scalars(select(WorkUnit).where(WorkUnit.job_id == job_id)).all()
            scored = session.scalars(
                select(FoldScore.metric).where(FoldScore.job_id == job_id)
            ).all()
    finally:
        engine.dispose()
    inner = Counter((u.scope, u.halving_round) for u in units if u.kind == "inner")
    scopes = [f"r{row['repeat']}f{row['fold']}" for row in result["outer"]] + ["all"]
    for scope, search in zip(scopes, [*searches, final], strict=True):
        assert [inner[(scope, r)] for r in range(len(search.n_candidates_))] == list(
            search.n_candidates_
        )
    assert {u.halving_round for u in units if u.kind != "inner"} == {0}
    assert all(u.status == "done" for u in units)
    assert result["work"]["units_total"] == len(units)
    # every inner fit scored every metric on its round's fold, once
    inner_fits = sum(sum(s.n_candidates_) * s.n_splits_ for s in [*searches, final])
    assert len(scored) == (inner_fits + CASES[CASE].outer) * len(CASES[CASE].metrics)


def test_the_same_request_again_reuses_every_round(
    runs: dict[str, tuple[str, dict[str, Any]]],
) -> None:
    (first_id, first), (again_id, again) = runs["first"], runs["again"]
    assert again_id != first_id
    assert again["work"]["fits"] == 0
    assert again["work"]["units_reused"] == again["work"]["units_total"]
    assert again["outer"] == first["outer"] and again["search"] == first["search"]
    assert again["final_pick"]["model_sha256"] == first["final_pick"]["model_sha256"]


def test_a_search_whose_round_ended_goes_on_while_the_others_run(store: Settings) -> None:
    """The units run here, one search at a time, through the workers' own batch path: the first
    search's next round is added as soon as its round ends, the others' first rounds still
    queued; run to the end in that order, the job still equals scikit-learn's."""
    upgrade_database(store.database_url)
    engine = make_engine(store.database_url)
    sessions = make_session_factory(engine)
    try:
        with sessions.begin() as session:
            body = CASES[CASE].request() | {"reuse": False}
            prepared = prepare_job(body, session=session, settings=store, base_dir=Path.cwd())
            job_id = create_job(session, prepared, store)

        def queued() -> list[WorkUnit]:
            with sessions() as session:
                return list(
                    session.scalars(
                        select(WorkUnit)
                        .where(WorkUnit.job_id == job_id, WorkUnit.status == "queued")
                        .order_by(WorkUnit.id)
                    )
                )

        first_scope = queued()[0].scope
        for unit in [u for u in queued() if u.scope == first_scope]:
            run_batch_and_advance(sessions, [unit.id], settings=store, worker="test")
        waiting = queued()
        assert {(u.scope, u.halving_round) for u in waiting if u.scope == first_scope} == {
            (first_scope, 1)
        }
        assert {u.halving_round for u in waiting if u.scope != first_scope} == {0}
        while waiting:  # each search in turn, a unit at a time
            run_batch_and_advance(sessions, [waiting[0].id], settings=store, worker="test")
            waiting = sorted(queued(), key=lambda u: (u.scope != first_scope, u.id))
        with sessions() as session:
            job = session.get_one(Job, job_id)
            assert job.status == "succeeded", job.error
            result = job.result
    finally:
        engine.dispose()
    check_against_reference(result, CASE)
