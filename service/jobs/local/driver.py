"""The embedded default: a job or a learning curve run on a local process pool, local store.

The pool runs the same `run_batch_and_advance` a Celery worker runs, on the same batches
(`batch_unit_ids`: many fast units in one claim and one record, a slow unit alone), and the job
is started with the same `start_submitted` the API calls; this module only feeds batches of unit
ids to the pool, so the embedded and distributed paths cannot drift apart. A learning curve's
sizes are ordinary selection jobs, driven one after the other with one progress bar.
"""

from __future__ import annotations

import multiprocessing
from collections.abc import Callable, Iterator
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sqlalchemy import Engine
from sqlalchemy.orm import Session, sessionmaker
from threadpoolctl import threadpool_limits

from service.config import Settings
from service.cv.unit_batches import SPREAD
from service.jobs.curves.prepare import PreparedCurve, create_submission, prepare_submission
from service.jobs.curves.settle import CURVE_KIND, child_ids, settle_curve
from service.jobs.execution.batches import batch_unit_ids
from service.jobs.execution.execute import worker_name
from service.jobs.execution.plans import LoadedPlan, remember
from service.jobs.execution.run_batch import BatchReport, run_batch_and_advance
from service.jobs.intake.prepare import PreparedJob
from service.jobs.intake.start import start_submitted
from service.jobs.lifecycle import cancel_job, queued_unit_ids
from service.processes import die_with_parent, stop_pool
from service.store.db import dispose_after_fork, make_engine, make_session_factory, upgrade_database
from service.store.models import Job
from service.store.statuses import JobStatus, UnitStatus

Progress = Callable[[int, int], None]
Tick = Callable[[int], None]


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


def _child_execute(unit_ids: list[int]) -> tuple[BatchReport, list[int]]:
    return run_batch_and_advance(
        _child["sessions"], unit_ids, settings=_child["settings"], worker=worker_name()
    )


def pool_workers(workers: int, queued_units: int) -> int:
    """How many processes to run `queued_units` on: 1 (this process, no pool) unless a pool pays.

    A pool costs a fork, an engine and a plan per process before its first fit; with fewer
    units than two rounds of its workers (or none left: the store answered the job), the units
    run here, through the same `run_batch_and_advance`, at once.
    """
    if workers <= 1 or queued_units < 2 * workers:
        return 1
    return workers


@contextmanager
def _local_pool(
    engine: Engine, settings: Settings, workers: int
) -> Iterator[ProcessPoolExecutor | None]:
    """`workers` forked processes, or None to run units in this one."""
    if workers <= 1:
        yield None
        return
    context = multiprocessing.get_context("fork")
    with ProcessPoolExecutor(
        workers, mp_context=context, initializer=_child_start, initargs=(engine, settings)
    ) as pool:
        try:
            yield pool
        except BaseException:
            # SIGTERM or Ctrl-C: stop the fits now rather than after the units running in the
            # pool finish (leaving the block would wait for them)
            stop_pool(pool)
            raise


def _batches(
    sessions: sessionmaker[Session], unit_ids: list[int], pool: ProcessPoolExecutor | None
) -> list[list[int]]:
    with sessions() as session:
        # run here, one batch after another, no batch keeps another worker waiting
        spread = 1 if pool is None else SPREAD
        return batch_unit_ids(session, unit_ids, spread=spread)


def _all_done(report: BatchReport) -> bool:
    return all(status == UnitStatus.DONE for status in report.statuses.values())


def _drive(
    sessions: sessionmaker[Session],
    job_id: str,
    settings: Settings,
    pool: ProcessPoolExecutor | None,
    tick: Tick,
) -> None:
    """Run the job's queued units in batches (here, or on `pool`), and those each fan-in adds.

    A batch with a unit that did not end done (a failed fit, a cancelled job) ends the drive:
    the job has ended, and the units still running see that at their next stop check.
    """
    with sessions() as session:
        queued = queued_unit_ids(session, job_id)
    pending = _batches(sessions, queued, pool)
    if pool is None:
        me = worker_name()
        while pending:
            report, added = run_batch_and_advance(
                sessions, pending.pop(0), settings=settings, worker=me
            )
            tick(len(report.statuses))
            if not _all_done(report):
                return
            pending += _batches(sessions, added, pool)
        return
    running = {pool.submit(_child_execute, batch) for batch in pending}
    while running:
        finished, running = wait(running, return_when=FIRST_COMPLETED)
        for future in finished:
            report, added = future.result()
            tick(len(report.statuses))
            if not _all_done(report):
                for other in running:
                    other.cancel()
                return
            running |= {
                pool.submit(_child_execute, batch) for batch in _batches(sessions, added, pool)
            }


def _drive_selections(
    sessions: sessionmaker[Session],
    selections: list[tuple[str, int]],
    settings: Settings,
    pool: ProcessPoolExecutor | None,
    progress: Progress | None,
) -> None:
    # one bar over every selection: a size's units count after those of the sizes before it
    total = sum(units for _, units in selections)
    done = 0

    def tick(units: int) -> None:
        nonlocal done
        done += units
        if progress:
            progress(done, total)

    for job_id, units in selections:
        before = done
        _drive(sessions, job_id, settings, pool, tick)
        done = before + units
        with sessions() as session:
            if session.get_one(Job, job_id).status != JobStatus.SUCCEEDED:
                return  # a curve fails with it; the other sizes need not run


def _remember_plans(selections: list[str], prepared: PreparedJob | PreparedCurve) -> None:
    # the plans just built, so neither this process nor the forked pool builds them again;
    # child_ids lists a curve's sizes smallest first, and sizes are distinct
    if isinstance(prepared, PreparedCurve):
        jobs = sorted(prepared.children, key=lambda c: c.plan.spec.train_fraction)
    else:
        jobs = [prepared]
    for job_id, job in zip(selections, jobs, strict=True):
        table = job.table
        remember(job_id, LoadedPlan(job.plan, table.frame, dict(table.kinds), table.content_hash))


def _outcome(sessions: sessionmaker[Session], job_id: str) -> EmbeddedOutcome:
    with sessions() as session:
        job = session.get_one(Job, job_id)
        what = "learning curve" if job.kind == CURVE_KIND else "job"
        if job.status != JobStatus.SUCCEEDED:
            raise JobFailed(job.error or f"{what} {job_id} ended {job.status}")
        assert job.result is not None
        return EmbeddedOutcome(job_id, job.result)


def run_embedded(
    data: Any,
    *,
    settings: Settings,
    workers: int = 1,
    base_dir: Path | None = None,
    progress: Progress | None = None,
) -> EmbeddedOutcome:
    """Validate, store and run a job or learning curve here; raises BadInput or JobFailed."""
    upgrade_database(settings.database_url)
    engine = make_engine(settings.database_url)
    sessions = make_session_factory(engine)
    try:
        with sessions() as session:
            prepared = prepare_submission(
                data, session=session, settings=settings, base_dir=base_dir or Path.cwd()
            )
        with sessions.begin() as session:
            job_id = create_submission(session, prepared, settings)
            curve = isinstance(prepared, PreparedCurve)
            ids = child_ids(session, job_id) if curve else [job_id]
            selections = [(i, session.get_one(Job, i).units_total) for i in ids]
        _remember_plans(ids, prepared)
        try:
            start_submitted(sessions, job_id, settings)  # the store may answer a stage entirely
            with sessions() as session:
                queued = sum(len(queued_unit_ids(session, i)) for i, _ in selections)
            with _local_pool(engine, settings, pool_workers(workers, queued)) as pool:
                _drive_selections(sessions, selections, settings, pool, progress)
        except BaseException:
            with sessions.begin() as session:
                cancel_job(session, session.get_one(Job, job_id))
            raise
        if curve:
            settle_curve(sessions, job_id)
        return _outcome(sessions, job_id)
    finally:
        engine.dispose()
