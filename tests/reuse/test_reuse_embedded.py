"""Reuse across jobs on the embedded path (real PostgreSQL store, real fits)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from sqlalchemy import delete, select
from sqlalchemy.orm import Session, sessionmaker

from service.auth import Principal
from service.config import Settings, load_settings
from service.jobs.execution.reconcile import reconcile
from service.jobs.intake.submit import submit_job
from service.jobs.local.driver import run_embedded
from service.store.models import FoldPrediction, FoldScore, Job, JobCandidate, Pick, WorkUnit

from .conftest import count_scores, make_request, with_grid

ESTIMATE_PARTS = ("outer", "estimate", "final_pick", "pick_frequency", "optimism_gap")


def _same_estimate(a: dict[str, Any], b: dict[str, Any]) -> None:
    for part in ESTIMATE_PARTS:
        assert a[part] == b[part], part


def _units(sessions: sessionmaker[Session], job_id: str) -> list[WorkUnit]:
    with sessions() as session:
        return list(session.scalars(select(WorkUnit).where(WorkUnit.job_id == job_id)))


def test_resubmitting_a_finished_request_fits_nothing_and_gives_the_same_result(
    pg_settings: Settings, pg_sessions: sessionmaker[Session]
) -> None:
    first = run_embedded(make_request(), settings=pg_settings)
    stored = count_scores(pg_sessions)
    second = run_embedded(make_request(), settings=pg_settings)
    work = second.result["work"]
    assert work["fits"] == 0
    assert work["units_reused"] == work["units_total"] == first.result["work"]["units_total"]
    assert work["units_computed"] == 0
    assert first.result["work"]["fits"] > 0
    _same_estimate(first.result, second.result)
    assert count_scores(pg_sessions) == stored  # nothing new was written
    # every reused unit names the job whose scores (or model) it took
    assert {u.source_job_id for u in _units(pg_sessions, second.job_id)} == {first.job_id}
    assert {row["job_id"] for row in work["outer_computed_by"]} == {first.job_id}


def test_an_overlapping_grid_fits_only_the_new_candidates(
    pg_settings: Settings, pg_sessions: sessionmaker[Session]
) -> None:
    first = run_embedded(make_request(families=with_grid([0.1, 1.0])), settings=pg_settings)
    with pg_sessions() as session:
        first_ids = set(
            session.scalars(select(FoldScore.id).where(FoldScore.job_id == first.job_id))
        )
        first_picks = {
            (p.outer_repeat, p.outer_fold): p.candidate_key
            for p in session.scalars(select(Pick).where(Pick.job_id == first.job_id))
        }
    second = run_embedded(make_request(families=with_grid([0.1, 1.0, 0.01])), settings=pg_settings)
    with pg_sessions() as session:
        keys = {
            job: set(
                session.scalars(
                    select(JobCandidate.candidate_key).where(JobCandidate.job_id == job)
                )
            )
            for job in (first.job_id, second.job_id)
        }
        (new_key,) = keys[second.job_id] - keys[first.job_id]
        second_picks = {
            (p.outer_repeat, p.outer_fold): p.candidate_key
            for p in session.scalars(select(Pick).where(Pick.job_id == second.job_id))
        }
        old_scores = set(
            session.scalars(select(FoldScore.id).where(FoldScore.candidate_key != new_key))
        )
    # expected fits from the plan: the new candidate's inner units (3 outer scopes and the
    # all-rows scope, each over 3 inner folds), plus a refit for every outer fold whose pick is
    # not the first job's pick there, plus the final refit if the final pick changed
    expected = 4 * 3
    expected += sum(second_picks[f] != first_picks[f] for f in second_picks)
    expected += (
        second.result["final_pick"]["candidate_key"] != first.result["final_pick"]["candidate_key"]
    )
    assert second.result["work"]["fits"] == expected
    computed = [u for u in _units(pg_sessions, second.job_id) if not u.reused]
    assert {u.candidate_key for u in computed if u.kind == "inner"} == {new_key}
    # the overlapping scores are the stored rows themselves (same ids), not copies
    assert old_scores == first_ids


def test_a_new_metric_is_served_from_stored_predictions_without_a_fit(
    tmp_path: Path, pg_settings: Settings, pg_sessions: sessionmaker[Session]
) -> None:
    run_embedded(make_request(), settings=pg_settings)
    more = ["accuracy", "neg_log_loss", "roc_auc_ovr", "f1_macro"]
    served = run_embedded(make_request(metrics=more), settings=pg_settings)
    assert served.result["work"]["fits"] == 0
    # the reference: the same request fitted afresh in a store of its own, where each score is
    # scikit-learn's scorer (check_scoring) called on the refitted pipeline
    fresh_settings = load_settings({"FOLDWISE_HOME": str(tmp_path / "fresh")})
    fresh = run_embedded(make_request(metrics=more, reuse=False), settings=fresh_settings)
    assert fresh.result["work"]["fits"] > 0
    _same_estimate(served.result, fresh.result)
    with pg_sessions() as session:
        from_predictions = {
            (r.fold_fingerprint, r.candidate_key, r.metric): r.value
            for r in session.scalars(select(FoldScore).where(FoldScore.metric != "accuracy"))
        }
    from service.store.db import make_engine, make_session_factory

    engine = make_engine(fresh_settings.database_url)
    with make_session_factory(engine)() as session:
        refitted = {
            (r.fold_fingerprint, r.candidate_key, r.metric): r.value
            for r in session.scalars(select(FoldScore).where(FoldScore.metric != "accuracy"))
        }
    engine.dispose()
    assert from_predictions.keys() == refitted.keys()
    assert len(refitted) > 0
    for key, value in refitted.items():
        assert from_predictions[key] == value, key  # bit for bit: float64 predictions kept


def test_without_stored_predictions_a_new_metric_is_refitted(
    pg_settings: Settings, pg_sessions: sessionmaker[Session]
) -> None:
    first = run_embedded(make_request(), settings=pg_settings)
    with pg_sessions.begin() as session:
        session.execute(delete(FoldPrediction))
    second = run_embedded(make_request(metrics=["accuracy", "neg_log_loss"]), settings=pg_settings)
    # every scored unit is fitted again; only the final refit (no scores) comes from the store
    assert second.result["work"]["fits"] == first.result["work"]["fits"] - 1
    assert second.result["work"]["units_reused"] == 1


def test_reuse_false_recomputes_every_unit(
    pg_settings: Settings, pg_sessions: sessionmaker[Session]
) -> None:
    first = run_embedded(make_request(), settings=pg_settings)
    stored = count_scores(pg_sessions)
    again = run_embedded(make_request(reuse=False), settings=pg_settings)
    assert again.result["work"]["fits"] == first.result["work"]["fits"]
    assert again.result["work"]["units_reused"] == 0
    _same_estimate(first.result, again.result)
    # existing rows stay; the recomputed copies collide with their keys and are not inserted
    assert count_scores(pg_sessions) == stored


def test_the_reconciler_finishes_a_fully_reused_job_nobody_started(
    pg_settings: Settings, pg_sessions: sessionmaker[Session]
) -> None:
    first = run_embedded(make_request(), settings=pg_settings)
    # submitted as a service does, but the process "dies" before starting the settled job
    with pg_sessions.begin() as session:
        job_id = submit_job(
            session,
            make_request(),
            principal=Principal("local", frozenset({"submit"})),
            settings=pg_settings,
        ).job.id
    with pg_sessions() as session:
        assert session.get_one(Job, job_id).status == "queued"
    reconcile(pg_sessions, pg_settings)
    with pg_sessions() as session:
        job = session.get_one(Job, job_id)
        assert job.status == "succeeded"
        assert job.result is not None and job.result["work"]["fits"] == 0
        assert job.result["outer"] == first.result["outer"]
