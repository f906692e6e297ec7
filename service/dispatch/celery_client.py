"""Publishing units to Celery workers by task name (this side never imports `workers`)."""

from __future__ import annotations

from typing import Any

from celery import Celery

from service.config import Settings
from service.dispatch import TASK_RUN_AUDIT, TASK_RUN_UNIT, UNIT_QUEUE


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


class CeleryDispatcher:
    """Sends one `run_unit` message per unit id to the unit queue."""

    def __init__(self, settings: Settings) -> None:
        self.app = Celery("foldwise-publisher")
        self.app.conf.update(celery_options(settings))

    def publish(self, unit_ids: list[int]) -> None:
        """Send each id; a lost message is healed by the reconciler, not retried here."""
        for unit_id in unit_ids:
            self.app.send_task(TASK_RUN_UNIT, args=[unit_id], queue=UNIT_QUEUE)

    def publish_audit(self, audit_id: str) -> None:
        """Send one run_audit message; the audit row's status says whether it ran."""
        self.app.send_task(TASK_RUN_AUDIT, args=[audit_id], queue=UNIT_QUEUE)

    def close(self) -> None:
        """Close the broker connection pool."""
        self.app.close()
