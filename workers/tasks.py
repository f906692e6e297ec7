"""The tasks: run one work unit, a batch of them, or an audit. Ids in; the logic is in service.

The reconcile, schedule and delivery ticks are not tasks: `foldwise beat` runs them itself
(workers/ticks.py), so they never wait for a pool process busy with a fit."""

from __future__ import annotations

import logging
import os

from celery import Task

from service.dispatch import TASK_RUN_AUDIT, TASK_RUN_UNIT, TASK_RUN_UNITS
from service.dispatch.celery_client import send_units
from service.jobs.audits.audit import run_audit
from service.jobs.execution.run_batch import run_batch_and_advance
from service.jobs.execution.work import run_and_advance
from workers import state
from workers.app import app

log = logging.getLogger(__name__)


def publish(unit_ids: list[int]) -> None:
    """Send one run_unit message per id on this worker's app, recording when."""
    send_units(app, state.sessions(), unit_ids)


def worker_label(task: Task) -> str:
    """The Celery node name and this child's pid, recorded with every score it writes."""
    return f"{task.request.hostname}:{os.getpid()}"


@app.task(name=TASK_RUN_UNIT, bind=True)
def run_unit(self: Task, unit_id: int) -> str:
    """Run unit `unit_id` and publish whatever stage it completed; a duplicate is skipped."""
    # The claim inside run_and_advance decides: a second delivery of a finished or running
    # unit changes no row and returns "skipped", and the message is acknowledged and dropped.
    # Nothing here waits on another task (Celery's tasks guide): the next stage is published.
    report, new_units = run_and_advance(
        state.sessions(), unit_id, settings=state.settings(), worker=worker_label(self)
    )
    publish(new_units)
    log.info(
        "unit %s %s (%s fits), %s new units", unit_id, report.status, report.fits, len(new_units)
    )
    return str(report.status)


@app.task(name=TASK_RUN_UNITS, bind=True)
def run_units(self: Task, unit_ids: list[int]) -> str:
    """Run a batch of units (one claim, one record) and publish whatever stage it completed."""
    # as run_unit: the claim decides, so a redelivered batch runs only what nobody holds
    report, new_units = run_batch_and_advance(
        state.sessions(), unit_ids, settings=state.settings(), worker=worker_label(self)
    )
    publish(new_units)
    endings = ", ".join(f"unit {unit_id} {status}" for unit_id, status in report.statuses.items())
    log.info("%s (%s fits), %s new units", endings, report.fits, len(new_units))
    return ",".join(f"{unit_id}:{status}" for unit_id, status in report.statuses.items())


@app.task(name=TASK_RUN_AUDIT)
def run_audit_task(audit_id: str) -> str:
    """Recompute a queued audit's sample and store its report; a duplicate is skipped."""
    return run_audit(state.sessions(), audit_id, state.settings())
