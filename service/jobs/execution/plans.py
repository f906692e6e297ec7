"""A job's selection plan, rebuilt from the store by any process and cached per process."""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass

import pandas as pd
from sqlalchemy import select
from sqlalchemy.orm import Session

from service.config import Settings
from service.cv.plan import SelectionPlan, build_plan
from service.datasets.store import stored_frame_cached
from service.jobs.intake.request import JobRequest
from service.store.models import Dataset, Job, JobFold

_CACHE: OrderedDict[str, LoadedPlan] = OrderedDict()
_CACHE_SIZE = 8


@dataclass(frozen=True)
class LoadedPlan:
    """A plan with the table it was built on (read-only) and the table's column kinds."""

    plan: SelectionPlan
    frame: pd.DataFrame
    kinds: dict[str, str]
    dataset_hash: str


class PlanMismatch(RuntimeError):
    """This process splits the rows differently from the process that submitted the job."""


def remember(job_id: str, loaded: LoadedPlan) -> None:
    """Keep a plan for `job_id` (forked pool children inherit it)."""
    _CACHE[job_id] = loaded
    _CACHE.move_to_end(job_id)
    while len(_CACHE) > _CACHE_SIZE:
        _CACHE.popitem(last=False)


def fold_fingerprints(plan: SelectionPlan) -> set[str]:
    """Every fold fingerprint of a plan, outer (with a nested interval's), inner and a halving
    search's round folds."""
    prints = {f.fingerprint for f in plan.outer + plan.interval_folds}
    prints |= {f.fingerprint for folds in plan.inner.values() for f in folds}
    prints |= {f.fingerprint for rounds in plan.rounds.values() for fs in rounds for f in fs}
    return prints


def plan_for_job(session: Session, job_id: str, settings: Settings) -> LoadedPlan:
    """The job's plan, rebuilt from its stored request and table unless cached here."""
    if job_id in _CACHE:
        _CACHE.move_to_end(job_id)
        return _CACHE[job_id]
    job = session.get_one(Job, job_id)
    dataset = session.scalars(select(Dataset).where(Dataset.content_hash == job.dataset_hash)).one()
    frame = stored_frame_cached(session, job.dataset_hash, settings)
    kinds = {col["name"]: col["kind"] for col in dataset.columns}
    request = JobRequest.model_validate(job.request)
    plan = build_plan(request.spec(), frame, kinds)
    stored = set(session.scalars(select(JobFold.fingerprint).where(JobFold.job_id == job_id)))
    if stored != fold_fingerprints(plan):
        raise PlanMismatch(
            f"this worker ({plan.versions}) splits job {job_id}'s rows differently from the "
            "process that submitted it; run every process on the same library versions."
        )
    loaded = LoadedPlan(plan, frame, kinds, job.dataset_hash)
    remember(job_id, loaded)
    return loaded
