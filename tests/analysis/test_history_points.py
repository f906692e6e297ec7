"""A dataset's history reads each job's estimate and final pick from the small point kept beside its
result (service/jobs/history_point.py); on both stores it must show what the whole stored result
says, for every shape of result a job can hold, whether the point was written as the job ended or
filled in from the result by the migration that added it (0012)."""

from __future__ import annotations

import copy
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pytest
from alembic import command
from sqlalchemy import update
from sqlalchemy.orm import Session, sessionmaker
from store.rows import DATASET_HASH, add_job  # tests/store/rows.py: minimal valid rows

from service.analysis.history import dataset_history
from service.auth import Principal
from service.jobs.history_point import history_point_of
from service.jobs.queries.datasets import register_dataset
from service.store.db import alembic_config, make_engine, make_session_factory, upgrade_database
from service.store.followup_models import Refresh, Schedule
from service.store.models import Job

READER = Principal("local", frozenset({"read"}))
START = datetime(2026, 1, 1, 2, 0, tzinfo=UTC)


@pytest.fixture(params=("sqlite", "postgresql"))
def store_url(request: pytest.FixtureRequest, tmp_path: Path) -> str:
    """A store migrated to head, once per backend."""
    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path}/foldwise.sqlite"
    else:
        url = str(request.getfixturevalue("postgresql_url"))
    upgrade_database(url)
    return url


@pytest.fixture
def sessions(store_url: str) -> Iterator[sessionmaker[Session]]:
    engine = make_engine(store_url)
    try:
        yield make_session_factory(engine)
    finally:
        engine.dispose()


def _selection(pick_by: str, **estimate_of_pick: Any) -> dict[str, Any]:
    """A result v1 in the shape service/cv/selection.py assembles, reduced to what matters here."""
    other = {"mean": 0.5, "std": 0.1, "se": 0.05, "values": [0.4, 0.6]}
    return {
        "pick_by": pick_by,
        "metrics": sorted({pick_by, "balanced_accuracy"}),
        "estimate": {"balanced_accuracy": other, pick_by: estimate_of_pick},
        "final_pick": {
            "candidate_key": "c" * 64,
            "estimator": "LogisticRegression",
            "params": {"C": 0.1, "max_iter": 500},
            "inner_mean": 0.9,
            "model_sha256": "e" * 64,
        },
        "outer": [{"repeat": 0, "fold": 0, "scores": {pick_by: 1.0}}],
    }


# Floats whose shortest decimal forms have 16-17 digits: the history must give back the very
# doubles the result was written with, not a rounding of them.
INTERVAL = {"method": "quick", "level": 0.9, "lower": 0.9201167986223532, "upper": 1.0}
RESULTS: dict[str, tuple[str, dict[str, Any] | None]] = {
    "with interval": (
        "succeeded",
        _selection(
            "accuracy",
            mean=0.1 + 0.2,
            std=0.027888667551135844,
            se=0.012472191289246468,
            values=[0.3, 0.30000000000000004],
            interval=INTERVAL,
        ),
    ),
    # results made before intervals have no interval member
    "before intervals": (
        "succeeded",
        _selection("neg_log_loss", mean=-0.2231435513142097, std=0.0, se=1e-05, values=[-0.2]),
    ),
    "whole-number mean": ("succeeded", _selection("f1_macro", mean=1, se=0, interval=None)),
    # a learning curve's parent: pick_by, but no single estimate or final pick
    "curve parent": (
        "succeeded",
        {"kind": "learning_curve", "pick_by": "accuracy", "points": [{"size": 0.5}], "jobs": []},
    ),
    "running": ("running", None),
    "failed": ("failed", None),
    "cancelled after a result": ("cancelled", _selection("accuracy", mean=0.7, se=0.01)),
}


def _expected(job_id: str, status: str, result: dict[str, Any] | None) -> dict[str, Any]:
    """What the history showed when it decoded each whole result in Python (before SQL did)."""
    point: dict[str, Any] = {
        "job_id": job_id,
        "status": status,
        "pick_by": None,
        "mean": None,
        "se": None,
        "interval": None,
        "final_pick": None,
    }
    estimates = (result or {}).get("estimate") or {}
    if (
        status == "succeeded"
        and result
        and result.get("final_pick")
        and result["pick_by"] in estimates
    ):
        estimate = estimates[result["pick_by"]]
        point |= {
            "pick_by": result["pick_by"],
            "mean": float(estimate["mean"]),
            "se": float(estimate["se"]),
            "interval": estimate.get("interval"),
            "final_pick": {
                k: result["final_pick"][k] for k in ("candidate_key", "estimator", "params")
            },
        }
    return point


@pytest.mark.parametrize("written", ("as the job ended", "by the migration"))
def test_history_points_show_what_the_whole_result_says(
    sessions: sessionmaker[Session], store_url: str, written: str
) -> None:
    ids = {}
    with sessions.begin() as session:
        for n, (label, (status, result)) in enumerate(RESULTS.items()):
            job = add_job(
                session,
                status=status,
                result=copy.deepcopy(result),
                kind="learning_curve" if label == "curve parent" else "selection",
                created_at=START + timedelta(days=n),
            )
            # succeed_job (service/jobs/lifecycle.py), the one writer of a succeeded result,
            # keeps its point beside it
            if status == "succeeded" and result is not None:
                job.history_point = history_point_of(copy.deepcopy(result))
            ids[label] = job.id
        register_dataset(session, DATASET_HASH, "local")
    if written == "by the migration":
        # a store from before the point: its column dropped, then added and filled again
        with sessions.begin() as session:
            session.execute(update(Job).values(history_point=None))
        command.downgrade(alembic_config(store_url), "0011")
        command.upgrade(alembic_config(store_url), "head")
    with sessions() as session:
        history = dataset_history(session, READER, DATASET_HASH)
    shown = [
        {
            k: getattr(p, k)
            for k in ("job_id", "status", "pick_by", "mean", "se", "interval", "final_pick")
        }
        for p in history.jobs
    ]
    expected = [_expected(ids[label], *RESULTS[label]) for label in RESULTS]
    assert shown == expected
    # the oracle does not agree by accident: most kinds of point carry an estimate, some not
    assert [p["mean"] is not None for p in expected] == [
        True,
        True,
        True,
        False,
        False,
        False,
        False,
    ]
    assert expected[0]["mean"] == 0.30000000000000004 and expected[1]["se"] == 1e-05
    assert isinstance(history.jobs[2].mean, float) and history.jobs[2].interval is None


def test_history_refreshes_found_through_the_visible_jobs(sessions: sessionmaker[Session]) -> None:
    with sessions.begin() as session:
        mine = add_job(session, status="succeeded", created_at=START)
        theirs = add_job(session, status="succeeded", team="other", created_at=START)
        register_dataset(session, DATASET_HASH, "local")
        for team in ("local", "other"):
            session.add(
                Schedule(id=f"{team}-schedule", team=team, source={}, template={}, cron="0 2 * * *")
            )
        session.flush()
        due = [START + timedelta(days=d) for d in range(4)]
        # the table was replaced by a newer one: the refresh names the job, not this dataset
        rows = [
            ("local-schedule", due[0], None, mine.id, None),
            ("local-schedule", due[1], "b" * 64, None, mine.id),
            ("local-schedule", due[2], DATASET_HASH, None, None),
            ("local-schedule", due[3], "b" * 64, theirs.id, None),  # a job the reader cannot see
            ("other-schedule", due[0], DATASET_HASH, theirs.id, None),
        ]
        for schedule, at, dataset, job, previous in rows:
            session.add(
                Refresh(
                    schedule_id=schedule,
                    due_at=at,
                    trigger="tick",
                    status="unchanged",
                    dataset_hash=dataset,
                    job_id=job,
                    previous_job_id=previous,
                )
            )
    with sessions() as session:
        history = dataset_history(session, READER, DATASET_HASH)
    assert [p.job_id for p in history.jobs] == [mine.id]
    assert [(r.due_at, r.job_id, r.previous_job_id) for r in history.refreshes] == [
        (due[0], mine.id, None),
        (due[1], None, mine.id),
        (due[2], None, None),
    ]
