"""The dispatcher interface and the bookkeeping every dispatcher shares."""

from __future__ import annotations

from typing import Protocol

from sqlalchemy import update
from sqlalchemy.orm import Session, sessionmaker

from service.store.db import utcnow
from service.store.models import WorkUnit


class Dispatcher(Protocol):
    """Something that can be told which units to run; it must not block on their work."""

    def publish(self, unit_ids: list[int]) -> None:
        """Hand these queued units over for running (at least once)."""

    def publish_audit(self, audit_id: str) -> None:
        """Hand a queued audit over for running (it recomputes in a worker, not in the API)."""

    def close(self) -> None:
        """Release connections, processes and threads."""


def mark_published(sessions: sessionmaker[Session], unit_ids: list[int]) -> None:
    """Record when units were handed over, so the reconciler can tell a lost message."""
    if not unit_ids:
        return
    with sessions.begin() as session:
        session.execute(
            update(WorkUnit).where(WorkUnit.id.in_(unit_ids)).values(published_at=utcnow())
        )
