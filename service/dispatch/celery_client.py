"""Publishing units to Celery workers by task name (this side never imports `workers`)."""

from __future__ import annotations

from typing import Any

from celery import Celery
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.dispatch import TASK_RUN_AUDIT, TASK_RUN_UNIT, UNIT_QUEUE
from service.dispatch.base import mark_audits_published, mark_published
from service.store.db import make_engine, make_session_factory


def celery_options(settings: Settings) -> dict[str, Any]:
    """The Celery settings both publishers and workers use."""
    transport = {"visibility_timeout": settings.visibility_timeout}
    return {
        "broker_url": settings.broker_url,
        "broker_transport_options": transport,
        "result_backend": None,
        "task_ignore_result": True,
        "task_serializer": "json",
        "accept_content": ["json"],
        "timezone": "UTC",
        "enable_utc": True,
        "task_default_queue": UNIT_QUEUE,
        "broker_connection_retry_on_startup": True,
    }


def send_units(app: Celery, sessions: sessionmaker[Session], unit_ids: list[int]) -> None:
    """Send one run_unit message per id, then record when (the reconciler reads that)."""
    if not unit_ids:
        return
    # Celery turns a direct queue into kombu's anonymous exchange, so these land in the queue's
    # list without the `_kombu.binding.*` key a broker flush deletes (kombu#1063).
    for unit_id in unit_ids:
        app.send_task(TASK_RUN_UNIT, args=[unit_id], queue=UNIT_QUEUE)
    mark_published(sessions, unit_ids)


def send_audits(app: Celery, sessions: sessionmaker[Session], audit_ids: list[str]) -> None:
    """Send one run_audit message per id, then record when (the reconciler reads that)."""
    for audit_id in audit_ids:
        app.send_task(TASK_RUN_AUDIT, args=[audit_id], queue=UNIT_QUEUE)
    mark_audits_published(sessions, audit_ids)


class CeleryDispatcher:
    """Sends one `run_unit` message per unit id to the unit queue."""

    def __init__(self, settings: Settings) -> None:
        self.app = Celery("foldwise-publisher")
        self.app.conf.update(celery_options(settings))
        # its own engine: only to record `published_at`; connects on the first publish
        self._engine = make_engine(settings.database_url)
        self._sessions = make_session_factory(self._engine)

    def publish(self, unit_ids: list[int]) -> None:
        """Send each id; a lost message is healed by the reconciler, not retried here."""
        send_units(self.app, self._sessions, unit_ids)

    def publish_audit(self, audit_id: str) -> None:
        """Send one run_audit message; the audit row's status says whether it ran."""
        send_audits(self.app, self._sessions, [audit_id])

    def close(self) -> None:
        """Close the broker connection pool and the store's."""
        self.app.close()
        self._engine.dispose()
