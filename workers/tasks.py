"""The tasks: run one work unit, and the reconcile, schedule and delivery ticks. Ids in; the logic
is in service."""

from __future__ import annotations

import logging
import os
from typing import Any

from celery import Task

from service.dispatch import TASK_RECONCILE, TASK_RUN_AUDIT, TASK_RUN_UNIT
from service.dispatch.broker_queue import broker_waiting
from service.dispatch.celery_client import send_audits, send_units
from service.jobs.audits.audit import run_audit
from service.jobs.execution.reconcile import reconcile
from service.jobs.execution.work import run_and_advance
from service.notify.delivery import deliver_due
from service.schedules.tick import tick_schedules
from workers import state
from workers.app import TASK_DELIVERY_TICK, TASK_SCHEDULE_TICK, app

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


@app.task(name=TASK_RECONCILE)
def reconcile_tick() -> dict[str, Any]:
    """Publish again what the store says waits and the broker lost; move stalled jobs on."""
    settings = state.settings()
    # read before the store: a message sent in between only looks lost once (a harmless copy)
    waiting = broker_waiting(settings.broker_url)
    found = reconcile(state.sessions(), settings, waiting)
    publish(found.republish)
    send_audits(app, state.sessions(), found.audits)
    if found.republish or found.advanced or found.abandoned or found.audits:
        log.warning(
            "reconcile: republished units %s and audits %s, advanced %s, gave up on %s",
            found.republish,
            found.audits,
            found.advanced,
            found.abandoned,
        )
    return {
        "republished": found.republish,
        "audits": found.audits,
        "advanced": found.advanced,
        "abandoned": found.abandoned,
    }


@app.task(name=TASK_SCHEDULE_TICK)
def schedule_tick() -> dict[str, Any]:
    """Refresh due schedules and finish refreshes whose job ended; publish new jobs' units."""
    report = tick_schedules(state.sessions(), state.settings())
    publish(report.units)
    return {"refreshes": report.refreshes, "finished": report.finished}


@app.task(name=TASK_DELIVERY_TICK)
def delivery_tick() -> dict[str, Any]:
    """Send the webhook deliveries that are due (signed, one attempt each)."""
    report = deliver_due(state.sessions(), state.settings())
    return {"delivered": report.delivered, "retried": report.retried, "gave_up": report.gave_up}


@app.task(name=TASK_RUN_AUDIT)
def run_audit_task(audit_id: str) -> str:
    """Recompute a queued audit's sample and store its report; a duplicate is skipped."""
    return run_audit(state.sessions(), audit_id, state.settings())
