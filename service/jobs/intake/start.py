"""Starting a just-committed job: the one post-commit step every way of submitting shares.

Creating a job stores its first units as queued, and takes from the store whatever it already
answers (reuse). After that commit the creator asks `start_submitted` which units to publish: the
queued ones, or, when the store answered a whole stage, the units the fan-in adds once the job is
moved on here (no unit would finish to trigger it). A learning curve's units are its sizes'.
"""

from __future__ import annotations

from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.jobs import lifecycle
from service.jobs.curves.settle import CURVE_KIND, child_ids, settle_curve
from service.jobs.execution.advance import advance_job
from service.store.models import Job


def start_if_settled(sessions: sessionmaker[Session], job_id: str, settings: Settings) -> list[int]:
    """Move on a job none of whose units is open; returns units to run (else nothing changes)."""
    with sessions.begin() as session:
        if lifecycle.has_open_units(session, job_id):
            return []
        lifecycle.start_job(session, job_id)
    return advance_job(sessions, job_id, settings)


def start_submitted(sessions: sessionmaker[Session], job_id: str, settings: Settings) -> list[int]:
    """The units to publish for a job whose creation was just committed (call once, after it).

    Plain jobs, learning curves and jobs the store answered entirely alike; the caller hands the
    ids to its dispatcher, which records when it published them.
    """
    with sessions() as session:
        curve = session.get_one(Job, job_id).kind == CURVE_KIND
        selections = child_ids(session, job_id) if curve else [job_id]
        queued = {s: lifecycle.queued_unit_ids(session, s) for s in selections}
    if curve:  # the parent has no units of its own: it runs from its start, with its sizes
        start_if_settled(sessions, job_id, settings)
    ids: list[int] = []
    for selection in selections:
        ids += queued[selection] or start_if_settled(sessions, selection, settings)
    if curve:
        settle_curve(sessions, job_id)  # sizes the store answered entirely may have ended it
    return ids
