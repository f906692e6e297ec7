"""One step of work as a worker (Celery or local pool) does it: run a unit, then fan in."""

from __future__ import annotations

from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.jobs.curves.settle import settle_parent
from service.jobs.execution.advance import advance_job
from service.jobs.execution.execute import UnitReport, execute_unit
from service.store.statuses import UnitStatus


def run_and_advance(
    sessions: sessionmaker[Session], unit_id: int, *, settings: Settings, worker: str
) -> tuple[UnitReport, list[int]]:
    """Run unit `unit_id`; if it finished its job's stage, return the next units to publish."""
    report = execute_unit(sessions, unit_id, settings=settings, worker=worker)
    if report.job_id is None or not report.stage_complete:
        if report.job_id is not None and report.status == UnitStatus.FAILED:
            settle_parent(sessions, report.job_id)  # a learning curve fails with its child
        return report, []
    added = advance_job(sessions, report.job_id, settings)
    if not added:  # the job may have finished: its learning curve, if any, may be complete
        settle_parent(sessions, report.job_id)
    return report, added
