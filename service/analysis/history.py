"""A dataset's history: its jobs over time with their estimates and final picks, and refreshes."""

from __future__ import annotations

from dataclasses import dataclass, fields
from datetime import datetime
from typing import Any

from sqlalchemy import or_, select
from sqlalchemy.orm import Session

from service.auth import Action, Principal, reaches_every_team
from service.jobs.queries.datasets import visible_dataset
from service.jobs.queries.jobs import job_query
from service.store.followup_models import Refresh, Schedule
from service.store.models import Job


@dataclass(frozen=True)
class HistoryPoint:
    """One job on the dataset: when it ran and, if it succeeded, what it estimated and picked."""

    job_id: str
    status: str
    kind: str
    schedule_id: str | None
    created_at: datetime
    finished_at: datetime | None
    pick_by: str | None
    mean: float | None  # outer estimate of pick_by
    se: float | None
    interval: dict[str, Any] | None  # estimate[pick_by].interval of result v1, when it has one
    final_pick: dict[str, Any] | None  # candidate_key, estimator, params


@dataclass(frozen=True)
class RefreshPoint:
    """One firing of a schedule that read this dataset (or replaced it with a newer table)."""

    id: int
    schedule_id: str
    due_at: datetime
    status: str
    job_id: str | None
    previous_job_id: str | None
    finished_at: datetime | None


@dataclass(frozen=True)
class DatasetHistory:
    """Jobs oldest first, and the refreshes that touched the dataset, oldest first."""

    dataset_hash: str
    jobs: list[HistoryPoint]
    refreshes: list[RefreshPoint]


def _point(row: Any) -> HistoryPoint:
    # a learning curve's parent has no single estimate or pick: it shows as a job without them
    point: dict[str, Any] = row.history_point or {}
    final = point.get("final_pick")
    return HistoryPoint(
        job_id=row.id,
        status=row.status,
        kind=row.kind,
        schedule_id=row.schedule_id,
        created_at=row.created_at,
        finished_at=row.finished_at,
        pick_by=point.get("pick_by") if final else None,
        mean=float(point["mean"]) if final else None,
        se=float(point["se"]) if final else None,
        interval=point.get("interval") if final else None,  # null in results before intervals
        final_pick=final,
    )


def dataset_history(session: Session, principal: Principal, content_hash: str) -> DatasetHistory:
    """The dataset's visible jobs and refreshes over time (NotFound if it is not visible)."""
    visible_dataset(session, content_hash, principal)
    # Only the small point each job keeps beside its result (service/jobs/history_point.py):
    # a year of nightly jobs' whole result documents took most of this question's time
    # (tests/benchmarks/bench_store_scale.py).
    visible = job_query(principal, dataset_hash=content_hash).order_by(None)
    query = visible.with_only_columns(
        Job.id,
        Job.status,
        Job.kind,
        Job.schedule_id,
        Job.created_at,
        Job.finished_at,
        Job.history_point,
    )
    jobs = sorted(session.execute(query), key=lambda j: (j.created_at, j.id))
    # the same jobs as a subquery: a year's job ids as bound parameters cost more to plan
    job_ids = visible.with_only_columns(Job.id).scalar_subquery()
    # the columns a refresh point shows, not whole rows with their comparison documents
    shown = [getattr(Refresh, f.name) for f in fields(RefreshPoint)]
    refresh_query = (
        select(*shown)
        .join(Schedule, Schedule.id == Refresh.schedule_id)
        .where(
            or_(
                Refresh.dataset_hash == content_hash,
                Refresh.job_id.in_(job_ids),
                Refresh.previous_job_id.in_(job_ids),
            )
        )
        .order_by(Refresh.due_at, Refresh.id)
    )
    if not reaches_every_team(principal, Action.READ):
        refresh_query = refresh_query.where(Schedule.team == principal.team)
    refreshes = [RefreshPoint(*r) for r in session.execute(refresh_query)]
    return DatasetHistory(content_hash, [_point(j) for j in jobs], refreshes)
