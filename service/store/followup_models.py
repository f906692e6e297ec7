"""Tables for what follows a job: audits, schedules and their refreshes, webhook deliveries.

Kept apart from service/store/models.py (datasets, jobs, folds, units, scores, tokens) so each
file stays readable; both share one `Base`, so one metadata holds every table.
"""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import Boolean, CheckConstraint, ForeignKey, String, UniqueConstraint, true
from sqlalchemy.orm import Mapped, mapped_column

# loaded with this module so that importing it gives the one metadata with every table
from service.store import blob_models as blob_models
from service.store.models import Base, one_of
from service.store.types import CreatedAt, Hash64, JsonDoc, LongText, Short

REFRESH_STATUSES = (
    "pending",
    "running",
    "unchanged",
    "reselected",
    "pick_changed",
    "degraded",
    "failed",
)
AUDIT_STATUSES = ("queued", "running", "done", "failed")
DELIVERY_STATUSES = ("pending", "delivered", "failed")


class Audit(Base):
    """A recomputation of (a sample of) a job's units, compared with what the store holds."""

    __tablename__ = "audit"
    __table_args__ = (CheckConstraint(one_of("status", AUDIT_STATUSES), name="status"),)

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    job_id: Mapped[str] = mapped_column(ForeignKey("job.id"), index=True)
    team: Mapped[str] = mapped_column(String(100))
    status: Mapped[Short]
    fraction: Mapped[float]
    seed: Mapped[int]
    tolerance: Mapped[float]
    report: Mapped[JsonDoc | None]
    created_at: Mapped[CreatedAt]
    # when its message was last sent (None: never); the reconciler sends a lost one again
    published_at: Mapped[datetime | None]
    finished_at: Mapped[datetime | None]


class Schedule(Base):
    """A changeable dataset source, a job template and a cron expression."""

    __tablename__ = "schedule"

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    team: Mapped[str] = mapped_column(String(100), index=True)
    source: Mapped[JsonDoc]
    template: Mapped[JsonDoc]  # job request v1 without its dataset
    cron: Mapped[str] = mapped_column(String(100))
    timezone: Mapped[str] = mapped_column(String(64), default="UTC", server_default="UTC")
    # the refresh is "degraded" when the pick_by estimate falls below this
    threshold: Mapped[float | None]
    webhook_url: Mapped[str | None] = mapped_column(String(2000))
    active: Mapped[bool] = mapped_column(Boolean, default=True, server_default=true())
    next_due_at: Mapped[datetime | None] = mapped_column(index=True)
    created_at: Mapped[CreatedAt]


class Refresh(Base):
    """One firing of a schedule; (schedule, due time) is unique, so a double tick makes one."""

    __tablename__ = "refresh"
    __table_args__ = (
        CheckConstraint(one_of("status", REFRESH_STATUSES), name="status"),
        UniqueConstraint("schedule_id", "due_at"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    schedule_id: Mapped[str] = mapped_column(ForeignKey("schedule.id"), index=True)
    due_at: Mapped[datetime]
    trigger: Mapped[str] = mapped_column(String(16))  # "tick" or "manual"
    status: Mapped[Short]
    dataset_hash: Mapped[Hash64 | None]
    job_id: Mapped[str | None] = mapped_column(ForeignKey("job.id"))
    previous_job_id: Mapped[str | None] = mapped_column(ForeignKey("job.id"))
    comparison: Mapped[JsonDoc | None]
    error: Mapped[LongText | None]
    created_at: Mapped[CreatedAt]
    finished_at: Mapped[datetime | None]


class WebhookDelivery(Base):
    """One notification and its delivery attempts (signed, retried with backoff)."""

    __tablename__ = "webhook_delivery"
    __table_args__ = (CheckConstraint(one_of("status", DELIVERY_STATUSES), name="status"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    team: Mapped[str] = mapped_column(String(100))
    url: Mapped[str] = mapped_column(String(2000))
    event: Mapped[str] = mapped_column(String(64))
    job_id: Mapped[str | None] = mapped_column(ForeignKey("job.id"))
    refresh_id: Mapped[int | None] = mapped_column(ForeignKey("refresh.id"))
    body: Mapped[JsonDoc]
    status: Mapped[Short]
    attempts: Mapped[int] = mapped_column(default=0, server_default="0")
    last_status: Mapped[int | None]
    last_error: Mapped[LongText | None]
    next_attempt_at: Mapped[datetime | None] = mapped_column(index=True)
    created_at: Mapped[CreatedAt]
    delivered_at: Mapped[datetime | None]
