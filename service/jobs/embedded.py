"""The embedded default: a job run on a local process pool against the local store.

The pool runs the same `execute_unit` a Celery worker runs; this module only feeds it unit ids
and calls the fan-in after each unit, so the embedded and distributed paths cannot drift apart.
"""

from __future__ import annotations

import multiprocessing
from collections.abc import Callable
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sqlalchemy import Engine, select
from sqlalchemy.orm import Session, sessionmaker
from threadpoolctl import threadpool_limits

from service.config import Settings
from service.jobs.curves import is_curve_request, without_selection_kind
from service.jobs.execute import UnitReport, worker_name
from service.jobs.plans import LoadedPlan, remember
from service.jobs.prepare import prepare_job
from service.jobs.reuse import start_if_settled
from service.jobs.service import cancel_job
from service.jobs.submit import create_job
from service.jobs.work import run_and_advance
from service.processes import die_with_parent, stop_pool
from service.store.db import dispose_after_fork, make_engine, make_session_factory, upgrade_database
from service.store.models import Job, WorkUnit

Progress = Callable[[int, int], None]


class JobFailed(RuntimeError):
    """The job ran but a unit failed; the message carries the failure."""


@dataclass(frozen=True)
class EmbeddedOutcome:
    """The stored job's id and its result v1."""

    job_id: str
    result: dict[str, Any]


# set in each pool child by _child_start; children inherit the parent's plan cache at fork
_child: dict[str, Any] = {}


def _child_start(engine: Engine, settings: Settings) -> None:
    die_with_parent()  # a killed `foldwise select` takes its pool with it
    dispose_after_fork(engine)
    # one BLAS/OpenMP thread per process: two processes on two cores must not fight over them
    _child["limits"] = threadpool_limits(1)
    _child["sessions"] = make_session_factory(engine)
    _child["settings"] = settings


def _child_execute(unit_id: int) -> tuple[UnitReport, list[int]]:
    return run_and_advance(
        _child["sessions"], unit_id, settings=_child["settings"], worker=worker_name()
    )


def _queued_units(session: Session, job_id: str) -> list[int]:
    return list(
        session.scalars(
            select(WorkUnit.id)
            .where(WorkUnit.job_id == job_id, WorkUnit.status == "queued")
            .order_by(WorkUnit.id)
        )
    )


def _drive(
    sessions: sessionmaker[Session],
    job_id: str,
    settings: Settings,
    pool: ProcessPoolExecutor | None,
    total: int,
    progress: Progress | None,
) -> None:
    """Run the job's queued units (here, or on `pool`) and the units each fan-in adds."""
    with sessions() as session:
        pending = _queued_units(session, job_id)
    done = 0
    if pool is None:
        me = worker_name()
        while pending:
            report, added = run_and_advance(sessions, pending.pop(0), settings=settings, worker=me)
            if report.status != "done":
                return
            done += 1
            if progress:
                progress(done, total)
            pending += added
        return
    running = {pool.submit(_child_execute, uid) for uid in pending}
    while running:
        finished, running = wait(running, return_when=FIRST_COMPLETED)
        for future in finished:
            report, added = future.result()
            if report.status != "done":
                for other in running:
                    other.cancel()
                return
            done += 1
            if progress:
                progress(done, total)
            running |= {pool.submit(_child_execute, uid) for uid in added}


def run_embedded(
    data: Any,
    *,
    settings: Settings,
    workers: int = 1,
    base_dir: Path | None = None,
    progress: Progress | None = None,
) -> EmbeddedOutcome:
    """Validate, store and run a job here; raises BadInput (nothing stored) or JobFailed."""
    if is_curve_request(data):  # one selection job per size, each driven as below
        from service.jobs.curves_embedded import run_embedded_curve  # which imports this module

        return run_embedded_curve(
            data, settings=settings, workers=workers, base_dir=base_dir, progress=progress
        )
    data = without_selection_kind(data)
    upgrade_database(settings.database_url)
    engine = make_engine(settings.database_url)
    sessions = make_session_factory(engine)
    try:
        with sessions() as session:
            prepared = prepare_job(
                data, session=session, settings=settings, base_dir=base_dir or Path.cwd()
            )
        with sessions.begin() as session:
            job_id = create_job(session, prepared, settings)
            total = session.get_one(Job, job_id).units_total
        table = prepared.table
        remember(
            job_id, LoadedPlan(prepared.plan, table.frame, dict(table.kinds), table.content_hash)
        )
        start_if_settled(sessions, job_id, settings)  # every unit may have come from the store
        try:
            if workers > 1:
                context = multiprocessing.get_context("fork")
                with ProcessPoolExecutor(
                    workers,
                    mp_context=context,
                    initializer=_child_start,
                    initargs=(engine, settings),
                ) as pool:
                    try:
                        _drive(sessions, job_id, settings, pool, total, progress)
                    except BaseException:
                        # SIGTERM or Ctrl-C: stop the fits now rather than after the units
                        # running in the pool finish (leaving the block would wait for them)
                        stop_pool(pool)
                        raise
            else:
                _drive(sessions, job_id, settings, None, total, progress)
        except BaseException:
            with sessions.begin() as session:
                cancel_job(session, session.get_one(Job, job_id))
            raise
        with sessions() as session:
            job = session.get_one(Job, job_id)
            if job.status != "succeeded":
                raise JobFailed(job.error or f"job {job_id} ended {job.status}")
            assert job.result is not None
            return EmbeddedOutcome(job_id, job.result)
    finally:
        engine.dispose()
