"""Running one work unit against the store: claim it, fit and score, record, release.

The same function serves the local pool of the embedded default and (later) Celery tasks: it
takes an id, opens its own sessions, and the database decides whether this copy may run.
"""

from __future__ import annotations

import os
import socket
import time
import traceback
from dataclasses import dataclass
from pathlib import Path

from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.cv.scopes import FINAL_SCOPE
from service.cv.selection import pick
from service.cv.units import (
    NonFiniteScore,
    UnitCancelled,
    UnitOutcome,
    UnitRef,
    fit_and_score,
)
from service.jobs import lifecycle
from service.jobs.execution.plans import LoadedPlan, plan_for_job
from service.jobs.execution.scores import load_book
from service.jobs.handover import model_file
from service.store.db import insert_ignoring_duplicates
from service.store.models import FinalModel, FoldPrediction, FoldScore, Job, WorkUnit
from service.store.statuses import UnitStatus


@dataclass(frozen=True)
class UnitReport:
    """How a unit ended here: done, failed, cancelled, or skipped (another copy owns it)."""

    unit_id: int
    job_id: str | None
    status: str  # a UnitStatus, or "skipped"
    fits: int = 0
    # True when this unit was the last open one of its job: the caller should fan in
    stage_complete: bool = False


def worker_name() -> str:
    """host:pid, recorded beside every score this process writes."""
    return f"{socket.gethostname()}:{os.getpid()}"


class _CancelCheck:
    """Asks the store whether the job was cancelled, at most once per `every` seconds."""

    def __init__(self, sessions: sessionmaker[Session], job_id: str, every: float = 1.0) -> None:
        self.sessions, self.job_id, self.every = sessions, job_id, every
        self.checked_at = time.monotonic()  # the claim has just checked

    def __call__(self) -> bool:
        now = time.monotonic()
        if now - self.checked_at < self.every:
            return False
        self.checked_at = now
        with self.sessions() as session:
            return lifecycle.is_stopped(session.get_one(Job, self.job_id))


def _save_model(outcome: UnitOutcome, settings: Settings) -> tuple[str, Path, int]:
    # kept in skops' format only: the bytes a client downloads are the bytes hashed here
    payload = model_file.model_bytes(outcome.model)
    digest = model_file.sha256(payload)
    settings.model_dir.mkdir(parents=True, exist_ok=True)
    path = settings.model_dir / f"{digest}{model_file.SUFFIX}"
    if not path.exists():
        temporary = path.with_suffix(f".{os.getpid()}.tmp")
        temporary.write_bytes(payload)
        os.replace(temporary, path)
    return digest, path, len(payload)


def _record(
    session: Session,
    unit: WorkUnit,
    outcome: UnitOutcome,
    loaded: LoadedPlan,
    settings: Settings,
    worker: str,
) -> None:
    seed = unit_seed(loaded, unit.candidate_key)
    rows = [
        {
            "dataset_hash": loaded.dataset_hash,
            "fold_fingerprint": fold["fingerprint"],
            "candidate_key": unit.candidate_key,
            "metric": metric,
            "value": value,
            "fit_seconds": fold["fit_seconds"],
            "score_seconds": fold["score_seconds"],
            "n_train": fold["n_train"],
            "n_test": fold["n_test"],
            "seed": seed,
            "versions": loaded.plan.versions,
            "worker": worker,
            "job_id": unit.job_id,
            "unit_id": unit.id,
        }
        for fold in outcome.folds
        for metric, value in fold["scores"].items()
    ]
    # a redelivered copy of a finished unit inserts nothing: the key already holds the score
    insert_ignoring_duplicates(session, FoldScore, rows)
    # the out-of-fold predictions, so a later request can add a metric without a refit
    predictions = [
        {
            "dataset_hash": loaded.dataset_hash,
            "fold_fingerprint": fold["fingerprint"],
            "candidate_key": unit.candidate_key,
            "kind": fold["predictions"].kind,
            "classes": fold["predictions"].classes,
            "data": fold["predictions"].encode(),
            "job_id": unit.job_id,
        }
        for fold in outcome.folds
        if "predictions" in fold
    ]
    insert_ignoring_duplicates(session, FoldPrediction, predictions)
    if outcome.model is not None:
        digest, path, size = _save_model(outcome, settings)
        final = pick(loaded.plan, FINAL_SCOPE, load_book(session, loaded))
        insert_ignoring_duplicates(
            session,
            FinalModel,
            [
                {
                    "job_id": unit.job_id,
                    "candidate_key": final.candidate.key,
                    "sha256": digest,
                    "path": str(path),
                    "size_bytes": size,
                    "inner_mean": final.inner_mean,
                }
            ],
        )


def unit_seed(loaded: LoadedPlan, candidate_key: str) -> int | None:
    """The estimator's random_state for this candidate, if it has one."""
    value = loaded.plan.candidate(candidate_key).params.get("random_state")
    return value if isinstance(value, int) else None


def _finish(
    sessions: sessionmaker[Session], unit_id: int, status: UnitStatus, error: str | None = None
) -> None:
    with sessions.begin() as session:
        unit = session.get_one(WorkUnit, unit_id)
        if status == UnitStatus.CANCELLED:
            lifecycle.unit_cancelled(unit)
            return
        first_line = (error or "").strip().splitlines()[-1] if error else "unknown error"
        lifecycle.unit_failed(
            session,
            unit,
            error or "unknown error",
            job_error=f"unit {unit_id} ({unit.kind} {unit.scope}) failed: {first_line}",
        )


def execute_unit(
    sessions: sessionmaker[Session], unit_id: int, *, settings: Settings, worker: str
) -> UnitReport:
    """Claim, run and record unit `unit_id`; never raises for a failing fit."""
    with sessions.begin() as session:
        if not lifecycle.claim_unit(session, unit_id, worker, settings.unit_lease):
            return UnitReport(unit_id, None, "skipped")
        unit = session.get_one(WorkUnit, unit_id)
        job_id = unit.job_id
        ref = UnitRef(unit.kind, unit.scope, unit.candidate_key)  # type: ignore[arg-type]
        lifecycle.start_job(session, job_id)
    try:
        with sessions() as session:
            loaded = plan_for_job(session, job_id, settings)
        outcome = fit_and_score(loaded.plan, ref, _CancelCheck(sessions, job_id))
    except UnitCancelled:
        _finish(sessions, unit_id, UnitStatus.CANCELLED)
        return UnitReport(unit_id, job_id, UnitStatus.CANCELLED)
    except NonFiniteScore as exc:  # its sentence is the whole story: no traceback to read
        _finish(sessions, unit_id, UnitStatus.FAILED, str(exc))
        return UnitReport(unit_id, job_id, UnitStatus.FAILED)
    except Exception:
        _finish(sessions, unit_id, UnitStatus.FAILED, traceback.format_exc())
        return UnitReport(unit_id, job_id, UnitStatus.FAILED)
    with sessions.begin() as session:
        unit = session.get_one(WorkUnit, unit_id)
        _record(session, unit, outcome, loaded, settings, worker)
        last = lifecycle.unit_done(session, unit, fits=outcome.fits, seconds=outcome.seconds)
    return UnitReport(unit_id, job_id, UnitStatus.DONE, outcome.fits, stage_complete=last)
