"""The dispatcher interface and the bookkeeping every dispatcher shares."""

from __future__ import annotations

import logging
from typing import Protocol

from sqlalchemy import update
from sqlalchemy.orm import Session, sessionmaker

from service.store.db import utcnow
from service.store.followup_models import Audit
from service.store.models import WorkUnit

log = logging.getLogger(__name__)


class Dispatcher(Protocol):
    """Something that can be told which units to run; it must not block on their work."""

    def publish(self, unit_ids: list[int]) -> None:
        """Hand these queued units over for running (at least once), recording when."""

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


def mark_audits_published(sessions: sessionmaker[Session], audit_ids: list[str]) -> None:
    """Record when audits were handed over (a queued audit never sent is sent by the reconciler)."""
    if not audit_ids:
        return
    with sessions.begin() as session:
        session.execute(update(Audit).where(Audit.id.in_(audit_ids)).values(published_at=utcnow()))


def publish_after_commit(dispatcher: Dispatcher, unit_ids: list[int], job_id: str) -> None:
    """Publish a committed job's units; a failure is logged, as the reconciler publishes again.

    Published only after the commit, from the committed rows: a crash in between leaves queued
    units with no `published_at`, which the reconciler finds (jobs.execution.reconcile).
    """
    try:
        dispatcher.publish(unit_ids)
    except Exception:
        log.exception("publishing job %s failed; the reconciler will publish it", job_id)
