"""Prometheus text exposition (format 0.0.4), built from the store by hand.

The store is the source of truth for jobs and units, so every scrape reads it; nothing is kept in
process memory, and any API process answers the same numbers.
"""

from __future__ import annotations

from collections.abc import Sequence

from sqlalchemy import case, func, select
from sqlalchemy.orm import Session

from service.store.models import JOB_STATUSES, Job, WorkUnit
from service.store.statuses import UnitStatus

CONTENT_TYPE = "text/plain; version=0.0.4; charset=utf-8"
# Units range from a fraction of a second (a linear model on a small table) to many minutes.
UNIT_SECONDS_BUCKETS = (0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0, 60.0, 300.0, 900.0, 3600.0)


def _number(value: float) -> str:
    return repr(float(value)) if value != int(value) else str(int(value))


def _family(
    name: str, kind: str, help_text: str, samples: Sequence[tuple[str, float]]
) -> list[str]:
    lines = [f"# HELP {name} {help_text}", f"# TYPE {name} {kind}"]
    lines += [f"{series} {_number(value)}" for series, value in samples]
    return lines


def render_metrics(session: Session) -> str:
    """Jobs by status, units done, unit durations and queue depth."""
    by_status = dict(
        session.execute(select(Job.status, func.count()).group_by(Job.status)).tuples().all()
    )
    jobs = [(f'foldwise_jobs{{status="{s}"}}', by_status.get(s, 0)) for s in JOB_STATUSES]
    done = session.scalar(select(func.count()).where(WorkUnit.status == UnitStatus.DONE)) or 0
    queued = session.scalar(select(func.count()).where(WorkUnit.status == UnitStatus.QUEUED)) or 0
    timed = WorkUnit.status == UnitStatus.DONE, WorkUnit.seconds.is_not(None)
    bucket_counts = session.execute(
        select(
            func.count(),
            func.coalesce(func.sum(WorkUnit.seconds), 0.0),
            *(func.sum(case((WorkUnit.seconds <= b, 1), else_=0)) for b in UNIT_SECONDS_BUCKETS),
        ).where(*timed)
    ).one()
    count, total, *cumulative = bucket_counts
    histogram = [
        (f'foldwise_unit_seconds_bucket{{le="{_number(b)}"}}', c or 0)
        for b, c in zip(UNIT_SECONDS_BUCKETS, cumulative, strict=True)
    ]
    histogram += [
        ('foldwise_unit_seconds_bucket{le="+Inf"}', count),
        ("foldwise_unit_seconds_sum", total),
        ("foldwise_unit_seconds_count", count),
    ]
    lines = [
        *_family("foldwise_jobs", "gauge", "Selection jobs in the store by status.", jobs),
        *_family(
            "foldwise_units_done_total",
            "counter",
            "Work units finished since the store was created.",
            [("foldwise_units_done_total", done)],
        ),
        *_family(
            "foldwise_unit_seconds",
            "histogram",
            "Wall seconds of finished work units.",
            histogram,
        ),
        *_family(
            "foldwise_queue_depth",
            "gauge",
            "Work units waiting to run.",
            [("foldwise_queue_depth", queued)],
        ),
    ]
    return "\n".join(lines) + "\n"
