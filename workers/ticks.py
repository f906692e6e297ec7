"""`foldwise beat`: the reconcile, schedule and delivery ticks, each on a thread of its own.

The ticks run in this one process, not as Celery tasks on the workers. As tasks they waited for a
free pool process: with every worker busy on long units (one pool process each is a common
deployment) a tick message expired unrun, so a dead worker's unit was noticed only when a
survivor finished its own work, and a schedule could miss its night while a long job ran. Here a
tick waits for nothing but the store and the broker, and a slow tick (a schedule reading a large
source) never delays another kind.

Started as `python -m workers.ticks` by `foldwise beat`; exactly one per deployment, though two
are safe (every tick is idempotent: docs/schedules.md), only wasteful.
"""

from __future__ import annotations

import argparse
import logging
import signal
import threading
import time
from collections.abc import Callable
from types import FrameType

from service.dispatch.broker_queue import broker_waiting
from service.dispatch.celery_client import send_audits
from service.jobs.execution.reconcile import reconcile
from service.notify.delivery import deliver_due
from service.schedules.tick import tick_schedules
from workers import state
from workers.app import app
from workers.tasks import publish

log = logging.getLogger("foldwise.beat")

# schedules fire on the minute (cron), webhooks are retried on a back-off of minutes
SCHEDULE_SECONDS = 60.0
DELIVERY_SECONDS = 60.0
READY_LINE = "beat: Starting the reconcile, schedule and delivery ticks"


def reconcile_once() -> None:
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


def schedules_once() -> None:
    """Refresh due schedules and finish refreshes whose job ended; publish new jobs' units."""
    report = tick_schedules(state.sessions(), state.settings())
    publish(report.units)
    if report.refreshes or report.finished:
        log.info("schedules: refreshed %s, finished %s", report.refreshes, report.finished)


def deliveries_once() -> None:
    """Send the webhook deliveries that are due (signed, one attempt each)."""
    report = deliver_due(state.sessions(), state.settings())
    if report.delivered or report.retried or report.gave_up:
        log.info(
            "webhooks: delivered %s, retried %s, gave up on %s",
            report.delivered,
            report.retried,
            report.gave_up,
        )


def every(name: str, period: float, tick: Callable[[], None], stop: threading.Event) -> None:
    """Run `tick` now and then once per `period` until `stop`; a failure waits for the next."""
    due = time.monotonic()
    while not stop.is_set():
        try:
            tick()
        except Exception:  # the store or broker away: the next tick tries again
            log.exception("%s tick failed; the next comes in %g s", name, period)
        due += period
        now = time.monotonic()
        # a tick that outran its period starts the next one now, without a burst to catch up
        due = max(due, now)
        stop.wait(due - now)


def run(stop: threading.Event) -> list[threading.Thread]:
    """Start the three tick threads; they end once `stop` is set."""
    state.sessions()  # made once here, not raced for by three threads
    ticks = (
        ("reconcile", state.settings().reconcile_seconds, reconcile_once),
        ("schedules", SCHEDULE_SECONDS, schedules_once),
        ("webhooks", DELIVERY_SECONDS, deliveries_once),
    )
    threads = [
        threading.Thread(
            target=every, args=(name, period, tick, stop), name=f"tick-{name}", daemon=True
        )
        for name, period, tick in ticks
    ]
    for thread in threads:
        thread.start()
    return threads


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(prog="foldwise beat")
    parser.add_argument("--loglevel", default="INFO")
    options = parser.parse_args(argv)
    logging.basicConfig(
        level=options.loglevel.upper(),
        format="[%(asctime)s: %(levelname)s/%(threadName)s] %(message)s",
    )
    stop = threading.Event()

    def _stop(signum: int, _frame: FrameType | None) -> None:
        log.info("beat: %s, stopping after the ticks in progress", signal.strsignal(signum))
        stop.set()

    signal.signal(signal.SIGTERM, _stop)
    signal.signal(signal.SIGINT, _stop)
    threads = run(stop)
    log.info("%s (reconcile every %g s)", READY_LINE, state.settings().reconcile_seconds)
    while not stop.wait(1.0):
        if not all(thread.is_alive() for thread in threads):
            # never a beat that runs on with a tick missing: exit, and the supervisor restarts it
            log.error("beat: a tick thread ended unexpectedly; exiting")
            raise SystemExit(1)
    # a tick in progress gets a moment to commit; the store's transactions make an interrupted
    # one harmless either way (the next beat finishes it)
    for thread in threads:
        thread.join(timeout=5)


if __name__ == "__main__":
    main()
