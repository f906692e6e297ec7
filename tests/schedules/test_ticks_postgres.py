"""The ticks on PostgreSQL, called in-process with a chosen `now`: one refresh per due time however
many ticks run at once, and webhook deliveries retried with backoff, every attempt recorded."""

from __future__ import annotations

import threading
from collections.abc import Iterator
from dataclasses import replace
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session, sessionmaker

from service.auth import Principal
from service.config import Settings, load_settings
from service.notify.delivery import MAX_ATTEMPTS, deliver_due
from service.notify.outbox import queue_delivery
from service.schedules.definitions import create_schedule
from service.schedules.tick import tick_schedules
from service.store.db import make_engine, make_session_factory, upgrade_database
from service.store.models import Job, Refresh, Schedule, WebhookDelivery

from .receiver import receiving
from .tables import TEMPLATE, write_table

NOW = datetime(2026, 12, 2, 3, 0, 30, tzinfo=UTC)


@pytest.fixture
def store(postgresql_url: str, tmp_path: Path) -> Iterator[tuple[sessionmaker[Session], Settings]]:
    upgrade_database(postgresql_url)
    root = tmp_path / "data"
    root.mkdir()
    write_table(root / "pumps.csv", seed=1)
    settings = replace(
        load_settings({"FOLDWISE_HOME": str(tmp_path / "home"), "FOLDWISE_DATA_ROOTS": str(root)}),
        database_url=postgresql_url,
        secret_key="test-only-secret-key",
        webhook_allow=("http://127.0.0.1/",),
        webhook_timeout=2.0,
    )
    engine = make_engine(postgresql_url)
    yield make_session_factory(engine), settings
    engine.dispose()


def _count(sessions: sessionmaker[Session], model: type) -> int:
    with sessions() as session:
        return int(session.scalar(select(func.count()).select_from(model)) or 0)


def test_two_ticks_at_the_same_due_time_make_one_refresh_and_one_job(
    store: tuple[sessionmaker[Session], Settings],
) -> None:
    sessions, settings = store
    with sessions.begin() as session:
        body = {"source": {"path": "pumps.csv"}, "template": TEMPLATE, "cron": "0 3 * * *"}
        schedule = create_schedule(
            session, body, principal=Principal("pumps", frozenset({"submit"})), settings=settings
        )
        schedule.next_due_at = datetime(2026, 12, 2, 3, 0, tzinfo=UTC)  # due a moment ago
        sid = schedule.id
    start = threading.Barrier(2)
    reports = []

    def tick() -> None:
        start.wait()
        reports.append(tick_schedules(sessions, settings, now=NOW))

    threads = [threading.Thread(target=tick) for _ in range(2)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=120)
    assert sorted(len(r.refreshes) for r in reports) == [0, 1]
    assert _count(sessions, Refresh) == 1 and _count(sessions, Job) == 1
    with sessions() as session:
        refresh = session.scalars(select(Refresh)).one()
        assert (refresh.status, refresh.trigger) == ("running", "tick")
        assert refresh.due_at == datetime(2026, 12, 2, 3, 0, tzinfo=UTC)
        # the next due time moved to tomorrow's 03:00 UTC, so a later tick finds nothing due
        assert session.get_one(Schedule, sid).next_due_at == datetime(2026, 12, 3, 3, 0, tzinfo=UTC)
    assert tick_schedules(sessions, settings, now=NOW + timedelta(minutes=1)).refreshes == []
    assert _count(sessions, Refresh) == 1


def _queue(sessions: sessionmaker[Session], url: str) -> int:
    with sessions.begin() as session:
        delivery = queue_delivery(
            session, team="pumps", url=url, event="refresh.finished", body={"refresh_id": 1}
        )
        session.flush()
        delivery.next_attempt_at = NOW
        return delivery.id


def test_a_failing_receiver_is_retried_with_backoff_and_every_attempt_recorded(
    store: tuple[sessionmaker[Session], Settings],
) -> None:
    sessions, settings = store
    with receiving([500, 503]) as receiver:
        # deliveries are checked against the allow-list as they are sent, too
        settings = replace(settings, webhook_allow=(receiver.url,))
        delivery_id = _queue(sessions, receiver.url + "hooks")
        first = deliver_due(sessions, settings, now=NOW)
        assert (first.retried, first.delivered) == (1, 0)
        with sessions() as session:
            row = session.get_one(WebhookDelivery, delivery_id)
            assert (row.attempts, row.last_status, row.status) == (1, 500, "pending")
            assert row.next_attempt_at == NOW + timedelta(seconds=5)  # base backoff 5 s
        # not due yet: nothing is sent
        assert deliver_due(sessions, settings, now=NOW + timedelta(seconds=4)).retried == 0
        assert len(receiver.got) == 1
        deliver_due(sessions, settings, now=NOW + timedelta(seconds=5))
        with sessions() as session:
            row = session.get_one(WebhookDelivery, delivery_id)
            assert (row.attempts, row.last_status) == (2, 503)
            assert row.next_attempt_at == NOW + timedelta(seconds=5 + 25)  # then 25 s
        done = deliver_due(sessions, settings, now=NOW + timedelta(seconds=30))
        assert done.delivered == 1
        with sessions() as session:
            row = session.get_one(WebhookDelivery, delivery_id)
            assert (row.status, row.attempts, row.last_status, row.last_error) == (
                "delivered",
                3,
                200,
                None,
            )
            assert row.delivered_at is not None
        # the three attempts carried the same bytes and the same signature
        assert len({(r.body, r.headers["X-Foldwise-Signature"]) for r in receiver.got}) == 1


def test_redirects_are_not_followed_and_delivery_gives_up_after_the_last_attempt(
    store: tuple[sessionmaker[Session], Settings],
) -> None:
    sessions, settings = store
    with receiving([302] * MAX_ATTEMPTS) as receiver:
        # deliveries are checked against the allow-list as they are sent, too
        settings = replace(settings, webhook_allow=(receiver.url,))
        delivery_id = _queue(sessions, receiver.url + "hooks")
        moment = NOW
        for _ in range(MAX_ATTEMPTS):
            deliver_due(sessions, settings, now=moment)
            moment += timedelta(days=1)
        with sessions() as session:
            row = session.get_one(WebhookDelivery, delivery_id)
            assert (row.status, row.attempts, row.last_status) == ("failed", MAX_ATTEMPTS, 302)
            assert row.next_attempt_at is None
        # every request went to the hook itself, never to the redirect's Location
        assert [r.path for r in receiver.got] == ["/hooks"] * MAX_ATTEMPTS


def test_nothing_is_sent_without_a_secret_key(
    store: tuple[sessionmaker[Session], Settings],
) -> None:
    sessions, settings = store
    with receiving() as receiver:
        delivery_id = _queue(sessions, receiver.url + "hooks")
        deliver_due(sessions, replace(settings, secret_key=None), now=NOW)
        assert receiver.got == []
    with sessions() as session:
        assert session.get_one(WebhookDelivery, delivery_id).attempts == 0
