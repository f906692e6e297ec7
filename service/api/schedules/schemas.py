"""What the schedule routes send."""

from __future__ import annotations

from datetime import datetime
from typing import Any, Literal

from pydantic import BaseModel, Field

RefreshStatus = Literal[
    "pending", "running", "unchanged", "reselected", "pick_changed", "degraded", "failed"
]


class ScheduleLinks(BaseModel):
    """Where to go next."""

    schedule: str
    refreshes: str
    refresh: str = Field(description="POST here to refresh now.")


class SchedulePublic(BaseModel):
    """A schedule: its source, template, cron expression and when it is next due."""

    id: str
    team: str
    source: dict[str, Any]
    template: dict[str, Any]
    cron: str
    timezone: str
    threshold: float | None
    degraded_on: Literal["estimate", "interval"] = Field(
        description="What `degraded` holds against the threshold: the estimate, or the "
        "interval's bound on the better side (the upper bound of a score; foldwise's losses are "
        "negated, so for them it is the smallest plausible loss)."
    )
    webhook: str | None
    active: bool
    next_due_at: datetime | None = Field(description="UTC.")
    created_at: datetime
    links: ScheduleLinks


class ScheduleList(BaseModel):
    """A page of schedules and the total count."""

    data: list[SchedulePublic]
    count: int


class RefreshPublic(BaseModel):
    """One firing: unchanged data, or a new job and how it compares with the previous one."""

    id: int
    schedule_id: str
    due_at: datetime
    trigger: Literal["tick", "manual"]
    status: RefreshStatus
    dataset_hash: str | None
    job_id: str | None
    previous_job_id: str | None
    comparison: dict[str, Any] | None = Field(
        description="pick_changed, the estimate's shift with the test used and its p-value, "
        "and whether it fell below the threshold."
    )
    error: str | None
    created_at: datetime
    finished_at: datetime | None


class RefreshList(BaseModel):
    """A page of refreshes, newest due time first, and the total count."""

    data: list[RefreshPublic]
    count: int
