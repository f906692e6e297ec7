"""Audits: recompute (a sample of) a job's units from scratch and compare with the store.

The recomputation is a fresh fit through the engine on the job's plan; it never reads a stored
score. Each stored score is then judged identical (bit for bit), within the stated tolerance, or
differing, with the versions stored beside it and the versions doing the recomputing. Stored
rows are only read: fold scores are never updated in place.
"""

from __future__ import annotations

import math
import traceback
import uuid
from typing import Any

import numpy as np
from sqlalchemy import CursorResult, select, update
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.cv.plan import library_versions
from service.cv.units import fit_and_score, ref_of
from service.errors import BadInput
from service.jobs.execution.plans import plan_for_job
from service.store.db import utcnow
from service.store.followup_models import Audit
from service.store.models import FoldScore, Job, WorkUnit
from service.store.statuses import JobStatus, UnitStatus

SCORED_KINDS = ("inner", "outer_refit")  # the final refit has a model, not scores


def check_audit_request(data: Any) -> tuple[float, int, float]:
    """(fraction, seed, tolerance) from an audit request body; raises BadInput naming the field."""
    if data is None:
        data = {}
    if not isinstance(data, dict):
        raise BadInput("request", "an audit request must be a JSON object (or empty).")
    unknown = sorted(set(data) - {"fraction", "seed", "tolerance"})
    if unknown:
        raise BadInput(
            unknown[0], "is not a field of an audit request; use fraction, seed, tolerance."
        )
    fraction = data.get("fraction", 1.0)
    if isinstance(fraction, bool) or not isinstance(fraction, int | float) or not 0 < fraction <= 1:
        raise BadInput("fraction", f"must be a number with 0 < fraction <= 1, not {fraction!r}.")
    seed = data.get("seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, int) or not 0 <= seed < 2**32:
        raise BadInput("seed", f"must be a whole number from 0 to 2**32 - 1, not {seed!r}.")
    tolerance = data.get("tolerance", 0.0)
    if (
        isinstance(tolerance, bool)
        or not isinstance(tolerance, int | float)
        or not math.isfinite(tolerance)
        or tolerance < 0
    ):
        raise BadInput("tolerance", f"must be a finite number of at least 0, not {tolerance!r}.")
    return float(fraction), seed, float(tolerance)


def request_audit(
    session: Session, job: Job, *, fraction: float, seed: int, tolerance: float, team: str
) -> Audit:
    """Store a queued audit of a succeeded job; the caller commits, then runs or publishes it."""
    if job.status != JobStatus.SUCCEEDED:
        raise BadInput("job", f"job {job.id} is {job.status}; only a succeeded job can be audited.")
    audit = Audit(
        id=uuid.uuid4().hex,
        job_id=job.id,
        team=team,
        status="queued",
        fraction=fraction,
        seed=seed,
        tolerance=tolerance,
    )
    session.add(audit)
    session.flush()
    return audit


def sample_units(units: list[WorkUnit], fraction: float, seed: int) -> list[WorkUnit]:
    """ceil(fraction x n) of the units, drawn without replacement with `seed`, in id order."""
    if not units:
        return []
    count = min(len(units), max(1, math.ceil(fraction * len(units))))
    chosen = np.random.default_rng(seed).choice(len(units), size=count, replace=False)
    return [units[i] for i in sorted(int(i) for i in chosen)]


def verdict(stored: float, recomputed: float, tolerance: float) -> str:
    """identical (same float, NaN alike), within_tolerance, or differing."""
    if stored == recomputed or (math.isnan(stored) and math.isnan(recomputed)):
        return "identical"
    if abs(stored - recomputed) <= tolerance:
        return "within_tolerance"
    return "differing"


def _compare_unit(
    session: Session, unit: WorkUnit, outcome_folds: list[dict[str, Any]], dataset_hash: str
) -> list[dict[str, Any]]:
    items = []
    for fold in outcome_folds:
        stored_rows = {
            row.metric: row
            for row in session.scalars(
                select(FoldScore).where(
                    FoldScore.dataset_hash == dataset_hash,
                    FoldScore.fold_fingerprint == fold["fingerprint"],
                    FoldScore.candidate_key == unit.candidate_key,
                    FoldScore.metric.in_(sorted(fold["scores"])),
                )
            )
        }
        for metric, value in sorted(fold["scores"].items()):
            row = stored_rows.get(metric)
            items.append(
                {
                    "unit_id": unit.id,
                    "kind": unit.kind,
                    "scope": unit.scope,
                    "candidate_key": unit.candidate_key,
                    "fold_fingerprint": fold["fingerprint"],
                    "metric": metric,
                    "fold_score_id": row.id if row else None,
                    "stored": row.value if row else None,
                    "recomputed": value,
                    "stored_versions": row.versions if row else None,
                    "computed_by_job": row.job_id if row else None,
                    "computed_by_worker": row.worker if row else None,
                }
            )
    return items


def _claim(session: Session, audit_id: str) -> bool:
    claimed: CursorResult[Any] = session.execute(  # type: ignore[assignment]
        update(Audit).where(Audit.id == audit_id, Audit.status == "queued").values(status="running")
    )
    return claimed.rowcount == 1


def run_audit(sessions: sessionmaker[Session], audit_id: str, settings: Settings) -> str:
    """Claim a queued audit, recompute its sample and store the report; returns its status."""
    with sessions.begin() as session:
        if not _claim(session, audit_id):
            return "skipped"
    try:
        report = _recompute(sessions, audit_id, settings)
        status = "done"
    except Exception:
        report, status = {"error": traceback.format_exc().strip().splitlines()[-1]}, "failed"
    with sessions.begin() as session:
        audit = session.get_one(Audit, audit_id)
        audit.status, audit.report, audit.finished_at = status, report, utcnow()
    return status


def _recompute(
    sessions: sessionmaker[Session], audit_id: str, settings: Settings
) -> dict[str, Any]:
    with sessions() as session:
        audit = session.get_one(Audit, audit_id)
        job_id, fraction, seed, tolerance = (
            audit.job_id,
            audit.fraction,
            audit.seed,
            audit.tolerance,
        )
        loaded = plan_for_job(session, job_id, settings)
        units = list(
            session.scalars(
                select(WorkUnit)
                .where(
                    WorkUnit.job_id == job_id,
                    WorkUnit.status == UnitStatus.DONE,
                    WorkUnit.kind.in_(SCORED_KINDS),
                )
                .order_by(WorkUnit.id)
            )
        )
        chosen = sample_units(units, fraction, seed)
        items: list[dict[str, Any]] = []
        for unit in chosen:
            ref = ref_of(unit)
            # a fresh fit: no stored score is read, no fold's preprocessing shared from memory
            outcome = fit_and_score(loaded.plan, ref, share=False)
            items += _compare_unit(session, unit, outcome.folds, loaded.dataset_hash)
    counts = {"identical": 0, "within_tolerance": 0, "differing": 0, "missing": 0}
    for item in items:
        if item["stored"] is None:
            item["verdict"] = "missing"
        else:
            item["verdict"] = verdict(item["stored"], item["recomputed"], tolerance)
            item["difference"] = item["recomputed"] - item["stored"]
        counts[item["verdict"]] += 1
    return {
        "job_id": job_id,
        "units_in_job": len(units),
        "units_checked": len(chosen),
        "scores_checked": len(items),
        **counts,
        "versions_now": library_versions(),
        "items": items,
    }


def audit_view(audit: Audit) -> dict[str, Any]:
    """The audit as the API and the command line show it."""
    return {
        "id": audit.id,
        "job_id": audit.job_id,
        "status": audit.status,
        "fraction": audit.fraction,
        "seed": audit.seed,
        "tolerance": audit.tolerance,
        "created_at": audit.created_at.isoformat() if audit.created_at else None,
        "finished_at": audit.finished_at.isoformat() if audit.finished_at else None,
        "report": audit.report,
    }
