"""A schedule tick killed half-way is finished by the next tick: every schedule once, no twin job.

Three schedules read sql sources on the test's PostgreSQL and fall due one after the other. The
second one's table is locked by the test (what a slow source database does), so the real tick,
run by the beat process (workers/ticks.py), commits the first schedule's refresh and job and then
waits inside the second. The beat's process group is SIGKILLed right there, the lock is released,
and a second beat takes over at default settings (what a supervisor restarting it does). Its
ticks must refresh the second and third schedules, leave the first alone (its due time was
committed with its job), publish the first job's units the dead tick never sent, and the three
jobs must finish on the one worker with every fold score of their plans stored once.
"""

from __future__ import annotations

import json
import time
from collections.abc import Iterator
from datetime import timedelta
from pathlib import Path
from typing import Any

import numpy as np
import psycopg
import pytest
from schedules.tables import TEMPLATE
from sqlalchemy import create_engine, func, select, text

from service.auth import Principal
from service.schedules.definitions import create_schedule
from service.store.db import utcnow
from service.store.followup_models import Refresh
from service.store.models import FoldScore, Job, JobCandidate

from .requests import expected_scores
from .stack import Stack, deploy, wait_until

TEAM = Principal("plant", frozenset({"submit"}))
TABLES = ("readings_a", "readings_b", "readings_c")
# beat's schedule tick comes every 60 s; then the jobs themselves, on one worker at a time
TICK_TIMEOUT = 150


def _psycopg_url(url: str) -> str:
    return url.replace("postgresql+psycopg://", "postgresql://")


def _write_tables(url: str) -> None:
    # invented rows: the label alternates, one feature carries it plus noise (seeded)
    engine = create_engine(url)
    with engine.begin() as connection:
        for number, table in enumerate(TABLES):
            rng = np.random.default_rng(number)
            labels = np.arange(120) % 2
            connection.execute(
                text(
                    f"CREATE TABLE {table} (id int, pressure float8, vibration float8, failed int)"
                )
            )
            connection.execute(
                text(f"INSERT INTO {table} VALUES (:id, :pressure, :vibration, :failed)"),
                [
                    {
                        "id": i,
                        "pressure": float(labels[i] * 1.5 + rng.normal()),
                        "vibration": float(rng.normal()),
                        "failed": int(labels[i]),
                    }
                    for i in range(120)
                ],
            )
    engine.dispose()


@pytest.fixture
def plant(tmp_path: Path, postgresql_url: str, redis_url: str) -> Iterator[Stack]:
    """A deployment whose sql sources may read the test database (team plant); no processes."""
    _write_tables(postgresql_url)
    connections = {"plant": {"url": postgresql_url, "teams": ["plant"]}}
    env = {
        "FOLDWISE_HOME": str(tmp_path / "home"),
        "FOLDWISE_DATABASE_URL": postgresql_url,
        "FOLDWISE_BROKER_URL": redis_url,
        "FOLDWISE_SQL_CONNECTIONS": json.dumps(connections),
    }
    stack = deploy(env, tmp_path / "home")
    try:
        yield stack
    finally:
        stack.stop()


def _schedules(stack: Stack) -> list[str]:
    ids = []
    now = utcnow()
    with stack.sessions.begin() as session:
        for number, table in enumerate(TABLES):
            query = f"SELECT pressure, vibration, failed FROM {table} ORDER BY id"
            body = {
                "source": {"sql": {"connection": "plant", "query": query}},
                "template": TEMPLATE,
                "cron": "0 3 * * *",
            }
            schedule = create_schedule(session, body, principal=TEAM, settings=stack.settings)
            # due a few minutes ago, one after the other: the tick takes them in this order
            schedule.next_due_at = now - timedelta(minutes=3 - number)
            ids.append(schedule.id)
    return ids


def _waiting_on_lock(url: str, table: str) -> bool:
    with psycopg.connect(_psycopg_url(url), autocommit=True) as connection:
        found = connection.execute(
            "SELECT count(*) FROM pg_stat_activity WHERE wait_event_type = 'Lock' "
            "AND query LIKE %s",
            (f"%{table}%",),
        ).fetchone()
    return bool(found and found[0])


def _refreshes(stack: Stack, schedule_id: str) -> list[Refresh]:
    with stack.sessions() as session:
        return list(session.scalars(select(Refresh).where(Refresh.schedule_id == schedule_id)))


def _jobs(stack: Stack, schedule_id: str) -> list[Job]:
    with stack.sessions() as session:
        return list(session.scalars(select(Job).where(Job.schedule_id == schedule_id)))


def test_a_tick_killed_half_way_is_finished_by_the_next(plant: Stack, postgresql_url: str) -> None:
    stack = plant
    first, second, third = _schedules(stack)
    lock = psycopg.connect(_psycopg_url(postgresql_url))
    try:
        lock.execute("LOCK TABLE readings_b IN ACCESS EXCLUSIVE MODE")  # held until rollback
        worker = stack.start_worker("w1")
        victim = stack.start_beat()
        stack.wait_ready(worker, "ready.")
        stack.wait_ready(victim, "beat: Starting the reconcile")
        wait_until(
            lambda: _waiting_on_lock(postgresql_url, "readings_b"),
            TICK_TIMEOUT,
            "the tick waiting inside the second schedule",
            stack,
        )
        # half-way: the first schedule's refresh and job are committed, the others untouched
        assert [len(_refreshes(stack, s)) for s in (first, second, third)] == [1, 0, 0]
        assert len(_jobs(stack, first)) == 1
        victim.kill_group()
        victim.popen.wait(timeout=10)
        killed = time.monotonic()
    finally:
        lock.rollback()
        lock.close()

    stack.wait_ready(stack.start("beat2", "beat"), "beat: Starting the reconcile")
    for schedule_id in (second, third):
        wait_until(lambda s=schedule_id: _jobs(stack, s), TICK_TIMEOUT, "a refresh", stack)
    print(f"\ntick killed -> remaining schedules refreshed: {time.monotonic() - killed:.1f} s")
    request: dict[str, Any] = TEMPLATE
    for schedule_id in (first, second, third):
        jobs = _jobs(stack, schedule_id)
        assert len(jobs) == 1, f"schedule {schedule_id} made {len(jobs)} jobs"
        assert len(_refreshes(stack, schedule_id)) == 1
        job = stack.wait_finished(jobs[0].id, timeout=TICK_TIMEOUT)
        with stack.sessions() as session:
            scores = session.scalar(select(func.count()).where(FoldScore.job_id == job.id))
            candidates = session.scalar(select(func.count()).where(JobCandidate.job_id == job.id))
        # every fold score of the plan, each once (the store's unique key forbids twins)
        assert scores == expected_scores(request, int(candidates or 0))
