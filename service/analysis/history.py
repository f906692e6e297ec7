"""A dataset's history: its jobs over time with their estimates and final picks, and refreshes."""

from __future__ import annotations

from dataclasses import dataclass, fields
from datetime import datetime
from typing import Any

from sqlalchemy import (
    ColumnElement,
    FromClause,
    Text,
    case,
    column,
    func,
    literal,
    or_,
    select,
    true,
)
from sqlalchemy.dialects.postgresql import JSONB
from sqlalchemy.orm import Session

from service.auth import Action, Principal, reaches_every_team
from service.jobs.queries.datasets import visible_dataset
from service.jobs.queries.jobs import job_query
from service.store.followup_models import Refresh, Schedule
from service.store.models import Job
from service.store.statuses import JobStatus
from service.store.types import JSONType


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


# What a history point shows of a result, in the order _pick_parts returns them: the outer
# estimate of the pick_by metric, then the final pick.
ESTIMATE_PARTS = ("mean", "se", "interval")
FINAL_PICK_PARTS = ("candidate_key", "estimator", "params")
_PARTS = len(ESTIMATE_PARTS) + len(FINAL_PICK_PARTS)


def _pick_parts(dialect: str) -> tuple[ColumnElement[Any], ColumnElement[Any], FromClause | None]:
    """SQL for a job's pick_by, a JSON array of the parts above, and a FROM item they need.

    Each array entry is the stored JSON value, so numbers keep the digits the result was written
    with (SQLite's single-path json_extract would hand back a REAL parsed by SQLite instead).
    """
    # Only a succeeded job's result has an estimate and a pick to show; reading no other result
    # also keeps a stored JSON null (no result) away from jsonb_to_record, which refuses it.
    result = case((Job.status == JobStatus.SUCCEEDED, Job.result))
    if dialect == "postgresql":
        # One jsonb_to_record call reads the (TOASTed, compressed) result once per row and hands
        # back its three members in memory; each `job.result -> ...` reads and decompresses the
        # whole document again. For 1,000 jobs the SQL took 15 ms so, 36 ms with three such
        # paths and over 100 ms with one per part (tests/benchmarks/bench_store_scale.py).
        record = (
            func.jsonb_to_record(result)
            .table_valued(
                column("pick_by", Text), column("estimate", JSONB), column("final_pick", JSONB)
            )
            .render_derived(name="result_parts", with_types=True)
        )
        estimate = record.c.estimate.op("->", return_type=JSONB)(record.c.pick_by)
        parts = func.jsonb_build_array(
            *(estimate[p] for p in ESTIMATE_PARTS),
            *(record.c.final_pick[p] for p in FINAL_PICK_PARTS),
            type_=JSONType,
        )
        return record.c.pick_by, parts, record
    # SQLite parses the text once for all paths of one json_extract call; missing paths give null
    pick_by = func.json_extract(result, "$.pick_by", type_=Text)
    metric = literal('$.estimate."').concat(pick_by).concat('".')
    paths: list[ColumnElement[str]] = [metric.concat(p) for p in ESTIMATE_PARTS]
    paths += [literal(f"$.final_pick.{p}") for p in FINAL_PICK_PARTS]
    return pick_by, func.json_extract(result, *paths, type_=JSONType), None


def _point(row: Any) -> HistoryPoint:
    pick_by = mean = se = final = interval = None
    parts: list[Any] = row.parts or [None] * _PARTS  # null unless the job succeeded
    mean_of, se_of, interval_of, *final_parts = parts
    # a learning curve's parent has no single estimate or pick; it shows as a job without them
    if mean_of is not None and final_parts[0] is not None:
        pick_by = row.pick_by
        mean, se = float(mean_of), float(se_of)
        interval = interval_of  # null in results made before intervals
        final = dict(zip(FINAL_PICK_PARTS, final_parts, strict=True))
    return HistoryPoint(
        job_id=row.id,
        status=row.status,
        kind=row.kind,
        schedule_id=row.schedule_id,
        created_at=row.created_at,
        finished_at=row.finished_at,
        pick_by=pick_by,
        mean=mean,
        se=se,
        interval=interval,
        final_pick=final,
    )


def dataset_history(session: Session, principal: Principal, content_hash: str) -> DatasetHistory:
    """The dataset's visible jobs and refreshes over time (NotFound if it is not visible)."""
    visible_dataset(session, content_hash, principal)
    # Only the parts of each result a point shows, picked out in SQL: decoding whole result
    # documents (every metric's fold values, the outer rows) of a year of nightly jobs took most
    # of this question's time (tests/benchmarks/bench_store_scale.py).
    pick_by, parts, parts_from = _pick_parts(session.get_bind().dialect.name)
    visible = job_query(principal, dataset_hash=content_hash).order_by(None)
    query = visible.with_only_columns(
        Job.id,
        Job.status,
        Job.kind,
        Job.schedule_id,
        Job.created_at,
        Job.finished_at,
        pick_by.label("pick_by"),
        parts.label("parts"),
    )
    if parts_from is not None:
        query = query.select_from(Job).outerjoin(parts_from, true())
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
