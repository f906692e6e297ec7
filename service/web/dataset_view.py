"""The dataset page: what the table is, every job on it, and its estimate over time.

Only jobs that answer the same question are drawn on one line: the same candidate set scored by
the same metric. A learning curve's sizes train on part of each fold, so they are listed apart.
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import PurePath
from typing import Any

from markupsafe import Markup
from sqlalchemy import select
from sqlalchemy.orm import Session

from service.analysis.history import HistoryPoint, dataset_history
from service.auth import Principal
from service.store.models import Dataset, Job, JobCandidate
from service.web import svg
from service.web.ticks import metric_bounds
from service.web.views import describe, fmt

# more comparable groups than this are listed in the table only
MAX_CHARTS = 6


def table_name(origin: dict[str, Any]) -> str:
    """The table as a person knows it: its file name, its sample or its SQL source."""
    if origin.get("upload"):
        return str(origin["upload"])
    if origin.get("path"):
        return PurePath(str(origin["path"])).name
    if origin.get("sample"):
        return f"{origin['sample']} (sample shipped with scikit-learn)"
    if origin.get("sql_table"):
        return f"{origin['sql_table']} (SQL, {origin.get('sql_connection', '')})"
    if origin.get("sql_query"):
        return f"a SQL query on {origin.get('sql_connection', 'a connection')}"
    return "unnamed table"


def time_label(when: datetime, with_year: bool) -> str:
    """'Dec 02\\n04:31' (two short lines that fit under a point), the year only when needed."""
    day = when.strftime("%b %d %Y" if with_year else "%b %d")
    return f"{day}\n{when:%H:%M}"


@dataclass
class Group:
    """Finished jobs with one candidate set and one pick_by metric, oldest first."""

    metric: str
    families: list[str]
    n_candidates: int
    points: list[HistoryPoint] = field(default_factory=list)


def _candidate_sets(session: Session, job_ids: list[str]) -> dict[str, tuple[str, ...]]:
    sets: dict[str, list[str]] = defaultdict(list)
    rows = session.execute(
        select(JobCandidate.job_id, JobCandidate.candidate_key).where(
            JobCandidate.job_id.in_(job_ids)
        )
    )
    for job_id, key in rows:
        sets[job_id].append(key)
    return {job_id: tuple(sorted(keys)) for job_id, keys in sets.items()}


def dataset_page(session: Session, content_hash: str, principal: Principal) -> dict[str, Any]:
    """Context of the dataset page: name, target, shape, jobs, comparable histories, refreshes."""
    # dataset_history applies the API's visibility rules (NotFound, team filter on refreshes)
    story = dataset_history(session, principal, content_hash)
    dataset = session.scalars(select(Dataset).where(Dataset.content_hash == content_hash)).one()
    ids = [p.job_id for p in story.jobs]
    jobs = {j.id: j for j in session.scalars(select(Job).where(Job.id.in_(ids)))} if ids else {}
    refresh_of = {r.job_id: r.status for r in story.refreshes if r.job_id}
    sets = _candidate_sets(session, ids) if ids else {}
    groups: dict[tuple[Any, ...], Group] = {}
    for point in story.jobs:
        job = jobs[point.job_id]
        if job.parent_id or point.mean is None or point.pick_by is None:
            continue
        key = (sets.get(point.job_id, ()), point.pick_by)
        if key not in groups:
            families = sorted({f["estimator"] for f in job.request.get("families", [])})
            groups[key] = Group(point.pick_by, families, len(key[0]))
        groups[key].points.append(point)
    ordered = sorted(groups.values(), key=lambda g: -len(g.points))
    with_year = len({p.created_at.year for p in story.jobs}) > 1
    charts = [
        {"group": g, "svg": _history_chart(g, refresh_of, with_year)} for g in ordered[:MAX_CHARTS]
    ]
    targets = sorted({str(j.request.get("target")) for j in jobs.values() if j.request})
    rows = [_row(point, jobs[point.job_id], refresh_of) for point in reversed(story.jobs)]
    return {
        "title": f"dataset {content_hash[:12]}",
        "content_hash": content_hash,
        "dataset": dataset,
        "table_name": table_name(dict(dataset.origin or {})),
        "targets": targets,
        "jobs": rows,
        "charts": charts,
        "more_groups": max(0, len(ordered) - MAX_CHARTS),
        "refreshes": story.refreshes,
    }


def _row(point: HistoryPoint, job: Job, refresh_of: dict[str, str]) -> dict[str, Any]:
    kind = "selection"
    if job.kind == "learning_curve":
        kind = "learning curve"
    elif job.parent_id:
        size = float(job.request.get("train_fraction", 1.0))
        kind = f"learning-curve size {size:.0%}"
    if point.job_id in refresh_of:
        kind += f" (refresh: {refresh_of[point.job_id]})"
    return {
        "id": point.job_id,
        "status": point.status,
        "created": point.created_at.strftime("%Y-%m-%d %H:%M"),
        "kind": kind,
        "metric": point.pick_by or "",
        "estimate": fmt(point.mean),
        "interval": f"{fmt(point.interval['lower'])} to {fmt(point.interval['upper'])}"
        if point.interval
        else "none",
        "pick": describe(point.final_pick) if point.final_pick else "none",
    }


def _history_chart(group: Group, refresh_of: dict[str, str], with_year: bool) -> Markup:
    labels: list[str] = []
    points = []
    for p in group.points:
        label = time_label(p.created_at, with_year)
        # jobs in the same minute still get a slot each on the ordinal time axis
        while label in labels:
            label += "\u200b"
        labels.append(label)
        note = f"refresh by a schedule: {refresh_of[p.job_id]}" if p.job_id in refresh_of else ""
        if not note and p.schedule_id:
            note = "refresh by a schedule"
        points.append(svg.Point(label, p.mean or 0.0, 1, note, p.job_id))
    return svg.line_chart(
        [(f"{group.n_candidates} candidates, {group.metric}", points)],
        labels,
        label=f"Nested {group.metric} estimate of {len(points)} comparable jobs over time",
        kind="history-point",
        y_title=f"nested {group.metric}",
        bounds=metric_bounds(group.metric),
    )
