"""Result v1 of a finished job, assembled from what the store holds."""

from __future__ import annotations

import platform
from typing import Any

import numpy as np
import sklearn
from sqlalchemy import func, select
from sqlalchemy.orm import Session

import service
from service.cv.cautions import find_cautions
from service.cv.selection import Pick as EnginePick
from service.cv.selection import ScoreBook, assemble
from service.jobs.plans import LoadedPlan
from service.store.db import utcnow
from service.store.models import FinalModel, Job, WorkUnit


def versions() -> dict[str, str]:
    """The versions a result was made with."""
    return {
        "foldwise": service.__version__,
        "scikit-learn": sklearn.__version__,
        "numpy": np.__version__,
        "python": platform.python_version(),
    }


def work_summary(session: Session, job: Job) -> dict[str, Any]:
    """How much work the job took: units, fits and wall seconds since submission."""
    done, fits = session.execute(
        select(func.count(), func.coalesce(func.sum(WorkUnit.fits), 0)).where(
            WorkUnit.job_id == job.id, WorkUnit.status == "done"
        )
    ).one()
    seconds = (utcnow() - job.created_at).total_seconds()
    return {
        "units_total": job.units_total,
        "units_computed": int(done),
        "units_reused": 0,
        "fits": int(fits),
        "seconds": round(seconds, 3),
    }


def build_result(
    session: Session, job: Job, loaded: LoadedPlan, book: ScoreBook, picks: dict[str, EnginePick]
) -> dict[str, Any]:
    """Result v1: the engine's aggregation plus dataset hash, model hash, work and versions."""
    result: dict[str, Any] = {"dataset_hash": loaded.dataset_hash}
    result |= assemble(loaded.plan, book, picks)
    model = session.get_one(FinalModel, job.id)
    result["final_pick"]["model_sha256"] = model.sha256
    result["work"] = work_summary(session, job)
    result["versions"] = versions()
    result["cautions"] = find_cautions(loaded.plan, loaded.frame, loaded.kinds)
    return result
