"""The embedded server's dispatcher: a local process pool fed from the store.

The store is the queue: a poller thread hands queued units to pool processes in batches sized
to their work (`batch_unit_ids`, as the Celery publisher sends them), and each process runs the
same `run_batch_and_advance` a Celery worker runs. Publishing only wakes the poller.
"""

from __future__ import annotations

import logging
import multiprocessing
import os
import socket
import threading
from concurrent.futures import Future, ProcessPoolExecutor
from typing import Any

from threadpoolctl import threadpool_limits

from service.config import Settings
from service.dispatch.base import mark_audits_published, mark_published
from service.jobs import lifecycle
from service.jobs.audits.audit import run_audit
from service.jobs.execution.batches import batch_unit_ids
from service.jobs.execution.execute import worker_name
from service.jobs.execution.reconcile import Waiting, reconcile
from service.jobs.execution.run_batch import run_batch_and_advance
from service.jobs.lifecycle import queued_units_of_live_jobs, release_claims
from service.notify.delivery import deliver_due
from service.processes import die_with, die_with_parent, pid_alive, stop_pool
from service.schedules.tick import tick_schedules
from service.store.db import make_engine, make_session_factory

log = logging.getLogger(__name__)
_child: dict[str, Any] = {}
# seconds a pool process has, after SIGTERM, to go before it is killed
SHUTDOWN_GRACE = 2.0
# newly queued units grouped into batches per tick: enough for eight full batches
# (service/cv/unit_batches.py), without reading a long queue's every row each second
HANDED_PER_TICK = 256


def _child_start(settings: Settings, server: int) -> None:
    # a fresh process (forkserver): its own engine, one BLAS thread per process. Its parent is
    # the fork server, which outlives a killed API process: it watches the API process itself
    die_with_parent()
    die_with(server)
    _child["limits"] = threadpool_limits(1)
    _child["sessions"] = make_session_factory(make_engine(settings.database_url))
    _child["settings"] = settings


def _child_run(unit_ids: list[int]) -> dict[int, str]:
    report, _ = run_batch_and_advance(
        _child["sessions"], unit_ids, settings=_child["settings"], worker=worker_name()
    )
    return report.statuses


def _child_audit(audit_id: str) -> str:
    return run_audit(_child["sessions"], audit_id, _child["settings"])


class LocalPool:
    """Runs queued units on `workers` local processes until closed."""

    def __init__(self, settings: Settings, workers: int = 2, poll_seconds: float = 1.0) -> None:
        self.settings = settings
        self.workers = workers
        self.poll_seconds = poll_seconds
        self._engine = make_engine(settings.database_url)
        self._sessions = make_session_factory(self._engine)
        context = multiprocessing.get_context("forkserver")
        # the fork server imports the heavy libraries once; every pool process forks from it
        # warm instead of paying seconds of imports on the first unit it runs
        context.set_forkserver_preload(
            [
                "service.jobs.execution.work",
                "sklearn.ensemble",
                "sklearn.linear_model",
                "sklearn.model_selection",
            ]
        )
        self._pool = ProcessPoolExecutor(
            workers, mp_context=context, initializer=_child_start, initargs=(settings, os.getpid())
        )
        self._take_back_from_the_dead()
        self._inflight: set[int] = set()  # units of the batches handed to pool processes
        self._batches = 0  # batches handed out and not yet ended
        self._ready: list[list[int]] = []  # batches made, waiting for a free process
        self._audits: set[str] = set()  # audits handed to a pool process, not yet ended
        self._lock = threading.Lock()
        self._wake = threading.Event()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, name="foldwise-local-pool", daemon=True)
        self._thread.start()
        # schedules and webhooks tick in a thread of their own: a slow receiver must not hold
        # up the handing out of units
        self._ticker = threading.Thread(
            target=self._ticks, name="foldwise-local-ticks", daemon=True
        )
        self._ticker.start()
        for _ in range(workers):  # start the processes now rather than on the first unit
            self._pool.submit(int)

    def _take_back_from_the_dead(self) -> None:
        """Units held by pool processes of this machine that no longer exist run again now.

        A server killed with its pool (kill -9, an OOM kill) leaves its units `running` under
        leases nobody renews. On this machine we can tell a dead holder from a silent one: its
        pid is gone. Their leases end now rather than up to FOLDWISE_UNIT_LEASE later. A holder
        whose pid is in use (another server on this store, or a reused pid) keeps its lease.
        """
        prefix = f"{socket.gethostname()}:"
        try:
            with self._sessions.begin() as session:
                dead = [
                    worker
                    for worker in lifecycle.running_holders(session, prefix)
                    if worker.removeprefix(prefix).isdigit()
                    and not pid_alive(int(worker.removeprefix(prefix)))
                ]
                lifecycle.expire_leases(session, dead)
        except Exception:  # the leases still lapse, and the reconciler takes the units then
            log.exception("could not take back the units of dead pool processes")
            return
        if dead:
            log.warning("taking back the units of pool processes that died: %s", dead)

    def publish(self, unit_ids: list[int]) -> None:
        """Record the hand-over and wake the poller: the units are already queued in the store."""
        mark_published(self._sessions, unit_ids)
        self._wake.set()

    def publish_audit(self, audit_id: str) -> None:
        """Recompute the audit on a pool process (fits stay out of the API process)."""
        mark_audits_published(self._sessions, [audit_id])
        with self._lock:
            self._hand_audit(audit_id)

    def _hand_audit(self, audit_id: str) -> None:
        if audit_id in self._audits:
            return
        self._audits.add(audit_id)
        future = self._pool.submit(_child_audit, audit_id)
        future.add_done_callback(self._audit_ended(audit_id))

    def _queued(self) -> list[int]:
        with self._sessions() as session:
            ids = queued_units_of_live_jobs(session)
        return [i for i in ids if i not in self._inflight]

    def _loop(self) -> None:
        while not self._stop.is_set():
            try:
                # leases that ran out, stalled jobs, audits nobody runs (a server killed before
                # it ran them), as the Celery beat tick does; this pool is their only broker
                with self._lock:
                    held = Waiting(set(self._inflight), set(self._audits))
                found = reconcile(self._sessions, self.settings, held)
                with self._lock:
                    for audit_id in found.audits:
                        if not self._stop.is_set():
                            self._hand_audit(audit_id)
                    self._hand_out(found.republish)
            except Exception:  # keep serving: the next tick retries from the store
                log.exception("local pool tick failed")
            self._wake.wait(self.poll_seconds)
            self._wake.clear()

    def _hand_out(self, republish: list[int]) -> None:
        """Batch the newly queued units, then hand batches to the free processes (lock held).

        Batches are made once, when their units are first seen queued, as the Celery publisher
        makes them when it publishes a stage: made again each tick from what is left, they
        would shrink as the queue drains. Units whose holder died go first; no more batches
        than the pool has processes are handed over: a batch handed over waits in the pool's
        own queue, where a lease that lapses later could not overtake it.
        """
        queued = dict.fromkeys(republish + self._queued())
        # units no longer queued (claimed elsewhere, cancelled) leave the waiting batches
        self._ready = [kept for batch in self._ready if (kept := [u for u in batch if u in queued])]
        batched = {unit_id for batch in self._ready for unit_id in batch}
        fresh = [u for u in queued if u not in self._inflight and u not in batched]
        again = set(republish)
        first = [u for u in fresh if u in again]
        rest = [u for u in fresh if u not in again][:HANDED_PER_TICK]
        self._ready = self._batches_of(first) + self._ready + self._batches_of(rest)
        while self._ready and self._batches < self.workers and not self._stop.is_set():
            self._hand_batch(self._ready.pop(0))

    def _batches_of(self, unit_ids: list[int]) -> list[list[int]]:
        if not unit_ids:
            return []
        with self._sessions() as session:
            return batch_unit_ids(session, unit_ids)

    def _hand_batch(self, batch: list[int]) -> None:
        """Give one batch to the pool (the caller holds the lock)."""
        self._inflight.update(batch)
        self._batches += 1
        future = self._pool.submit(_child_run, batch)
        future.add_done_callback(self._finished(batch))

    def _ticks(self) -> None:
        # what the Celery beat's schedule and delivery ticks do in the distributed mode
        while not self._stop.wait(self.poll_seconds):
            try:
                units = tick_schedules(self._sessions, self.settings).units
                if units:
                    self.publish(units)
                deliver_due(self._sessions, self.settings)
            except Exception:  # keep serving: the next tick retries from the store
                log.exception("local schedule or delivery tick failed")

    def _audit_ended(self, audit_id: str) -> Any:
        def done(future: Future[str]) -> None:
            with self._lock:
                self._audits.discard(audit_id)
            if not self._stop.is_set() and future.exception() is not None:
                log.error("audit %s crashed its process: %s", audit_id, future.exception())

        return done

    def _finished(self, batch: list[int]) -> Any:
        def done(future: Future[dict[int, str]]) -> None:
            with self._lock:
                self._inflight.difference_update(batch)
                self._batches -= 1
            # at shutdown the pool's processes are stopped on purpose (close, below)
            if not self._stop.is_set() and future.exception() is not None:
                log.error("units %s crashed their process: %s", batch, future.exception())
            self._wake.set()

        return done

    def close(self) -> None:
        """Stop polling and stop the pool's processes now, handing their units back.

        Units stop mid-fit rather than holding up the server's shutdown (a unit may run for
        up to FOLDWISE_UNIT_TIME_LIMIT seconds); their claims go back to queued, so the next
        start runs them again at once instead of waiting for their leases to run out.
        """
        self._stop.set()
        self._wake.set()
        with self._lock:
            pass  # a tick handing out units finishes; every later one sees _stop
        stopped = stop_pool(self._pool, grace=SHUTDOWN_GRACE)
        self._release_claims(stopped)
        # both threads are daemons and check _stop between ticks; a tick stuck in a slow
        # webhook receiver is not waited for beyond this
        self._thread.join(timeout=2)
        self._ticker.join(timeout=2)
        self._engine.dispose()

    def _release_claims(self, pids: list[int]) -> None:
        """Put the units the stopped processes were running back in the queue."""
        workers = [f"{socket.gethostname()}:{pid}" for pid in pids]
        if not workers:
            return
        try:
            with self._sessions.begin() as session:
                release_claims(session, workers)
        except Exception:  # their leases still run out, and the reconciler re-queues them
            log.exception("could not hand back the units of the stopped pool processes")
