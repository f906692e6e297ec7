"""A learning curve run in the embedded default: each size's selection job in turn, one pool.

The children are ordinary selection jobs, so each is driven exactly as `run_embedded` drives a
job (the same `_drive`, the same `execute_unit` and fan-in); this module only orders them and
settles the parent once they are done.
"""

from __future__ import annotations

import multiprocessing
from concurrent.futures import ProcessPoolExecutor
from contextlib import nullcontext
from pathlib import Path
from typing import Any

from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.jobs.curves import child_ids, create_curve, prepare_curve, settle_curve
from service.jobs.embedded import (
    EmbeddedOutcome,
    JobFailed,
    Progress,
    _child_start,
    _drive,
)
from service.jobs.plans import LoadedPlan, remember
from service.jobs.reuse import start_if_settled
from service.jobs.service import cancel_job
from service.processes import stop_pool
from service.store.db import make_engine, make_session_factory, upgrade_database
from service.store.models import Job


def _offset(progress: Progress | None, before: int, total: int) -> Progress | None:
    # one bar over every size: a child's units count after those of the sizes before it
    if progress is None:
        return None
    return lambda done, _child_total: progress(before + done, total)


def _drive_children(
    sessions: sessionmaker[Session],
    children: list[tuple[str, int]],
    settings: Settings,
    pool: ProcessPoolExecutor | None,
    progress: Progress | None,
) -> None:
    total = sum(units for _, units in children)
    before = 0
    for child_id, units in children:
        start_if_settled(sessions, child_id, settings)  # the store may answer a size entirely
        _drive(sessions, child_id, settings, pool, units, _offset(progress, before, total))
        before += units
        with sessions() as session:
            if session.get_one(Job, child_id).status != "succeeded":
                return  # the parent fails with it; the other sizes need not run


def run_embedded_curve(
    data: dict[str, Any],
    *,
    settings: Settings,
    workers: int = 1,
    base_dir: Path | None = None,
    progress: Progress | None = None,
) -> EmbeddedOutcome:
    """Validate, store and run a learning curve here; raises BadInput or JobFailed."""
    upgrade_database(settings.database_url)
    engine = make_engine(settings.database_url)
    sessions = make_session_factory(engine)
    try:
        with sessions() as session:
            prepared = prepare_curve(
                data, session=session, settings=settings, base_dir=base_dir or Path.cwd()
            )
        with sessions.begin() as session:
            parent_id = create_curve(session, prepared, settings)
            ids = child_ids(session, parent_id)
            children = [(i, session.get_one(Job, i).units_total) for i in ids]
        # child_ids lists the sizes smallest first, and sizes are distinct
        table = prepared.table
        by_size = sorted(prepared.children, key=lambda c: c.plan.spec.train_fraction)
        for (child_id, _), child in zip(children, by_size, strict=True):
            remember(
                child_id, LoadedPlan(child.plan, table.frame, dict(table.kinds), table.content_hash)
            )
        try:
            pool = (
                ProcessPoolExecutor(
                    workers,
                    mp_context=multiprocessing.get_context("fork"),
                    initializer=_child_start,
                    initargs=(engine, settings),
                )
                if workers > 1
                else None
            )
            with pool or nullcontext():
                try:
                    _drive_children(sessions, children, settings, pool, progress)
                except BaseException:
                    if pool is not None:
                        stop_pool(pool)  # as embedded.run_embedded: stop the fits now
                    raise
        except BaseException:
            with sessions.begin() as session:
                cancel_job(session, session.get_one(Job, parent_id))
            raise
        settle_curve(sessions, parent_id)
        with sessions() as session:
            parent = session.get_one(Job, parent_id)
            if parent.status != "succeeded":
                raise JobFailed(parent.error or f"learning curve {parent_id} ended {parent.status}")
            assert parent.result is not None
            return EmbeddedOutcome(parent_id, parent.result)
    finally:
        engine.dispose()
