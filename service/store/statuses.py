"""The status words of jobs and work units, as enums every module compares against.

The values are the strings the CHECK constraints in `models` allow (and migrations 0001-0006
wrote); a StrEnum member is a `str`, so it binds and compares as the stored text does.
"""

from __future__ import annotations

from enum import StrEnum


class JobStatus(StrEnum):
    """Where a job (a selection or a learning curve) is in its life."""

    QUEUED = "queued"
    RUNNING = "running"
    SUCCEEDED = "succeeded"
    FAILED = "failed"
    CANCELLED = "cancelled"


class UnitStatus(StrEnum):
    """Where a work unit is: a finished unit is "done", whether fitted or taken from the store."""

    QUEUED = "queued"
    RUNNING = "running"
    DONE = "done"
    FAILED = "failed"
    CANCELLED = "cancelled"


# a job that may still change: the only states a unit of it may be claimed in, and cancelled from
LIVE_JOB = (JobStatus.QUEUED, JobStatus.RUNNING)
ENDED_JOB = (JobStatus.SUCCEEDED, JobStatus.FAILED, JobStatus.CANCELLED)
BROKEN_JOB = (JobStatus.FAILED, JobStatus.CANCELLED)
OPEN_UNIT = (UnitStatus.QUEUED, UnitStatus.RUNNING)
