"""Writes the distributed path relies on: idempotent inserts, guarded statuses, strict JSON."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta, timezone

import pytest
from sqlalchemy import Engine, func, select, update
from sqlalchemy.exc import IntegrityError, StatementError

from service.store.db import insert_ignoring_duplicates, make_session_factory, utcnow
from service.store.models import Base, FoldScore, Job, JobFold, WorkUnit

from .rows import CANDIDATE_KEY, FINGERPRINT, add_job, score_row


def test_insert_ignoring_duplicates_counts_only_new_rows(engine: Engine) -> None:
    sessions = make_session_factory(engine)
    with sessions.begin() as session:
        job_id = add_job(session).id
    # A redelivered unit writes the same score again: the second write must be a no-op.
    with sessions.begin() as session:
        assert insert_ignoring_duplicates(session, FoldScore, [score_row(job_id)]) == 1
    with sessions.begin() as session:
        assert insert_ignoring_duplicates(session, FoldScore, [score_row(job_id, value=0.1)]) == 0
    with sessions.begin() as session:
        rows = [score_row(job_id), score_row(job_id, "roc_auc"), score_row(job_id, "f1")]
        assert insert_ignoring_duplicates(session, Base.metadata.tables["fold_score"], rows) == 2
        assert insert_ignoring_duplicates(session, FoldScore, []) == 0
    with sessions() as session:
        assert session.scalar(select(func.count()).select_from(FoldScore)) == 3
        # The first value stays: rows are never overwritten.
        kept = session.scalar(select(FoldScore.value).where(FoldScore.metric == "accuracy"))
        assert kept == 0.9


@pytest.mark.parametrize("model", [Job, WorkUnit])
def test_check_constraint_rejects_an_unknown_status(engine: Engine, model: type[Base]) -> None:
    sessions = make_session_factory(engine)
    with sessions.begin() as session:
        job = add_job(session)
        session.add(
            WorkUnit(
                job_id=job.id,
                kind="inner",
                scope="r0f0",
                outer_repeat=0,
                outer_fold=0,
                candidate_key=CANDIDATE_KEY,
            )
        )
    # Both backends name the violated constraint, so the convention's name is the contract.
    name = f"ck_{model.__tablename__}_status"
    with pytest.raises(IntegrityError, match=name), sessions.begin() as session:
        session.execute(update(model).values(status="finished"))


@pytest.mark.parametrize(
    ("scope", "parent_repeat", "parent_fold", "accepted"),
    [
        ("r0f3", 0, 3, True),
        ("r0f3", 0, 2, False),  # scope names another outer fold
        ("r0f3", None, None, False),  # 'r' || NULL is NULL: must not slip through
        ("all", 0, 3, False),
    ],
)
def test_inner_fold_scope_must_name_its_outer_fold(
    engine: Engine, scope: str, parent_repeat: int | None, parent_fold: int | None, accepted: bool
) -> None:
    sessions = make_session_factory(engine)
    with sessions.begin() as session:
        job_id = add_job(session).id
    row = JobFold(
        job_id=job_id,
        role="inner",
        scope=scope,
        repeat=0,
        fold_index=0,
        fingerprint=FINGERPRINT,
        parent_repeat=parent_repeat,
        parent_fold=parent_fold,
    )
    if accepted:
        with sessions.begin() as session:
            session.add(row)
        return
    with pytest.raises(IntegrityError), sessions.begin() as session:
        session.add(row)


def test_work_unit_key_is_unique(engine: Engine) -> None:
    sessions = make_session_factory(engine)
    with sessions.begin() as session:
        job_id = add_job(session).id
    rows = [
        {
            "job_id": job_id,
            "kind": "final_refit",
            "scope": "all",
            "candidate_key": CANDIDATE_KEY,
            "outer_repeat": None,
            "outer_fold": None,
        }
    ] * 2
    with sessions.begin() as session:
        assert insert_ignoring_duplicates(session, WorkUnit, rows) == 1
        unit = session.scalars(select(WorkUnit)).one()
    # Python-side defaults apply to Core inserts too.
    assert (unit.status, unit.attempts, unit.fits) == ("queued", 0, 0)
    assert unit.created_at.tzinfo is not None


def test_nan_inside_json_is_refused(engine: Engine) -> None:
    sessions = make_session_factory(engine)
    # SQLAlchemy wraps the serializer's ValueError on SQLite; psycopg calls it itself and lets the
    # ValueError through. Either way nothing reaches the table.
    refused = pytest.raises((StatementError, ValueError), match="not JSON compliant")
    with refused, sessions.begin() as session:
        add_job(session, result={"estimate": float("nan")})
    with sessions() as session:
        assert session.scalar(select(func.count()).select_from(Job)) == 0


def test_timestamps_come_back_aware_and_in_utc(engine: Engine) -> None:
    sessions = make_session_factory(engine)
    later = datetime(2026, 12, 1, 15, 30, tzinfo=timezone(timedelta(hours=2)))
    with sessions.begin() as session:
        job_id = add_job(session, started_at=later).id
    with sessions() as session:
        job = session.get_one(Job, job_id)
        assert job.started_at == later
        assert job.started_at is not None and job.started_at.tzinfo == UTC
        assert job.started_at.hour == 13
        assert job.created_at <= utcnow()
        # Comparisons in SQL see the same instant (the reconciler's `lease_until < now`).
        found = session.scalar(select(Job.id).where(Job.started_at < later + timedelta(seconds=1)))
        assert found == job_id


def test_naive_datetimes_are_refused(engine: Engine) -> None:
    sessions = make_session_factory(engine)
    with pytest.raises(StatementError, match="naive"), sessions.begin() as session:
        add_job(session, started_at=datetime(2026, 12, 1, 12, 0))


def test_objects_stay_readable_after_commit(engine: Engine) -> None:
    sessions = make_session_factory(engine)
    with sessions.begin() as session:
        job = add_job(session)
    assert job.status == "queued"  # no lazy reload of an expired attribute after the session
