"""Running one work unit against the store: claim it, fit and score, record, release.

The same function serves the local pool of the embedded default and Celery tasks: it takes an
id, opens its own sessions, and the database decides whether this copy may run. The claim is
kept alive by a heartbeat while the unit runs, and every write after it is fenced on the claim's
token, so a copy whose claim was taken over records nothing (docs/reliability.md).
"""

from __future__ import annotations

import os
import socket
import time
import traceback
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sqlalchemy.exc import SQLAlchemyError
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.cv.halving_race import pick_for
from service.cv.scopes import FINAL_SCOPE
from service.cv.units import (
    NonFiniteScore,
    UnitCancelled,
    UnitOutcome,
    UnitRef,
    fit_and_score,
    ref_of,
)
from service.jobs import lifecycle
from service.jobs.execution.heartbeat import Heartbeat
from service.jobs.execution.plans import LoadedPlan, plan_for_job
from service.jobs.execution.scores import load_book
from service.jobs.handover import model_file
from service.store import blobs
from service.store.db import insert_ignoring_duplicates
from service.store.host_cache import CopyRefused, HostCache, evict
from service.store.models import FinalModel, FoldPrediction, FoldScore, Job, WorkUnit
from service.store.statuses import UnitStatus

# a copy that claimed, then found its claim gone: it stopped and recorded nothing
LOST = "lost"


@dataclass(frozen=True)
class UnitReport:
    """How a unit ended here: done, failed, cancelled, or skipped (another copy owns it)."""

    unit_id: int
    job_id: str | None
    status: str  # a UnitStatus, "skipped" (never claimed) or "lost" (claim taken over)
    fits: int = 0
    # True when this unit was the last open one of its job: the caller should fan in
    stage_complete: bool = False


def worker_name() -> str:
    """host:pid, recorded beside every score this process writes."""
    return f"{socket.gethostname()}:{os.getpid()}"


class StopCheck:
    """Between fits: stop if the claim is lost, or (at most once per `every` s) the job stopped."""

    def __init__(
        self, sessions: sessionmaker[Session], job_id: str, beat: Heartbeat, every: float = 1.0
    ) -> None:
        self.sessions, self.job_id, self.beat, self.every = sessions, job_id, beat, every
        self.checked_at = time.monotonic()  # the claim has just checked

    def __call__(self) -> bool:
        if self.beat.lost():
            return True
        now = time.monotonic()
        if now - self.checked_at < self.every:
            return False
        self.checked_at = now
        try:
            with self.sessions() as session:
                return lifecycle.is_stopped(session.get_one(Job, self.job_id))
        except SQLAlchemyError:
            # the store is unreachable: not a failed fit; the heartbeat decides when the claim
            # must be given up, and the fit goes on meanwhile
            return False


@dataclass(frozen=True)
class ModelFile:
    """A final refit's model in skops' format, with its sha256 and this host's cached copy."""

    payload: bytes
    digest: str
    path: Path


def model_file_of(outcome: UnitOutcome, settings: Settings) -> ModelFile | None:
    """Serialize a unit's model and cache it on this host, before any transaction opens.

    Serializing a large model (thousands of trees) takes minutes; inside the record transaction
    that time is "idle in transaction", which PostgreSQL ends at 60 s (docs/store.md), failing
    the unit on every attempt. The cached copy is keyed by the hash, so writing it before the
    record (which may yet be refused) leaves nothing wrong behind.
    """
    if outcome.model is None:
        return None
    # kept in skops' format only: the bytes a client downloads are the bytes hashed here
    payload = model_file.model_bytes(outcome.model)
    digest = model_file.sha256(payload)
    path = HostCache.of(settings).path("model", digest)
    if not path.exists():
        path.parent.mkdir(parents=True, exist_ok=True)
        # a hidden temporary name, which the cache's sweep removes if this process dies here
        temporary = path.parent / f".{digest}.{os.getpid()}.tmp"
        temporary.write_bytes(payload)
        os.replace(temporary, path)
    return ModelFile(payload, digest, path)


def score_rows(
    unit_id: int, job_id: str, outcome: UnitOutcome, loaded: LoadedPlan, worker: str
) -> list[dict[str, Any]]:
    """One fold-score row per fold and metric a unit scored, with its key and provenance."""
    key = outcome.ref.candidate_key
    seed = unit_seed(loaded, key)
    return [
        {
            "dataset_hash": loaded.dataset_hash,
            "fold_fingerprint": fold["fingerprint"],
            "candidate_key": key,
            "metric": metric,
            "value": value,
            "fit_seconds": fold["fit_seconds"],
            "score_seconds": fold["score_seconds"],
            "n_train": fold["n_train"],
            "n_test": fold["n_test"],
            "seed": seed,
            "versions": loaded.plan.versions,
            "worker": worker,
            "job_id": job_id,
            "unit_id": unit_id,
        }
        for fold in outcome.folds
        for metric, value in fold["scores"].items()
    ]


def prediction_rows(job_id: str, outcome: UnitOutcome, loaded: LoadedPlan) -> list[dict[str, Any]]:
    """The out-of-fold predictions of a unit, so a later request can add a metric without a
    refit."""
    return [
        {
            "dataset_hash": loaded.dataset_hash,
            "fold_fingerprint": fold["fingerprint"],
            "candidate_key": outcome.ref.candidate_key,
            "kind": fold["predictions"].kind,
            "classes": fold["predictions"].classes,
            "data": fold["predictions"].encode(),
            "job_id": job_id,
        }
        for fold in outcome.folds
        if "predictions" in fold
    ]


def record_model(
    session: Session,
    job_id: str,
    saved: ModelFile | None,
    loaded: LoadedPlan,
    settings: Settings,
) -> None:
    """Store a final refit's model file (made by model_file_of) and its row; nothing without."""
    if saved is None:
        return
    # into the store in the record transaction, so a host without this one's disk serves it
    blobs.put_bytes(session, "model", saved.digest, saved.payload)
    evict(session, HostCache.of(settings), keep=saved.path)
    final = pick_for(loaded.plan, FINAL_SCOPE, load_book(session, loaded))
    insert_ignoring_duplicates(
        session,
        FinalModel,
        [
            {
                "job_id": job_id,
                "candidate_key": final.candidate.key,
                "sha256": saved.digest,
                "path": str(saved.path),
                "size_bytes": len(saved.payload),
                "inner_mean": final.inner_mean,
            }
        ],
    )


def _record(
    session: Session,
    unit: WorkUnit,
    outcome: UnitOutcome,
    saved: ModelFile | None,
    loaded: LoadedPlan,
    settings: Settings,
    worker: str,
) -> None:
    # a redelivered copy of a finished unit inserts nothing: the key already holds the score
    rows = score_rows(unit.id, unit.job_id, outcome, loaded, worker)
    insert_ignoring_duplicates(session, FoldScore, rows)
    insert_ignoring_duplicates(
        session, FoldPrediction, prediction_rows(unit.job_id, outcome, loaded)
    )
    record_model(session, unit.job_id, saved, loaded, settings)


def unit_seed(loaded: LoadedPlan, candidate_key: str) -> int | None:
    """The estimator's random_state for this candidate, if it has one."""
    value = loaded.plan.candidate(candidate_key).params.get("random_state")
    return value if isinstance(value, int) else None


def _finish(
    sessions: sessionmaker[Session],
    unit_id: int,
    token: str,
    status: UnitStatus,
    error: str | None = None,
) -> str:
    """End this copy's claim as cancelled or failed; LOST (nothing written) if it is not ours."""
    with sessions.begin() as session:
        if status == UnitStatus.CANCELLED:
            return status if lifecycle.claim_cancelled(session, unit_id, token) else LOST
        unit = session.get_one(WorkUnit, unit_id)
        first_line = (error or "").strip().splitlines()[-1] if error else "unknown error"
        failed = lifecycle.claim_failed(
            session,
            unit_id,
            token,
            error or "unknown error",
            job_error=f"unit {unit_id} ({unit.kind} {unit.scope}) failed: {first_line}",
        )
        return status if failed else LOST


def run_claimed(
    sessions: sessionmaker[Session],
    unit_id: int,
    token: str,
    job_id: str,
    ref: UnitRef,
    beat: Heartbeat,
    settings: Settings,
    worker: str,
) -> UnitReport:
    """Fit and record a unit this copy has claimed (`token`), while `beat` keeps the claim."""
    try:
        with sessions() as session:
            loaded = plan_for_job(session, job_id, settings)
        outcome = fit_and_score(loaded.plan, ref, StopCheck(sessions, job_id, beat))
    except UnitCancelled:
        if beat.lost():  # the claim is gone: another copy may be running it, write nothing
            return UnitReport(unit_id, job_id, LOST)
        beat.stop()
        return UnitReport(unit_id, job_id, _finish(sessions, unit_id, token, UnitStatus.CANCELLED))
    except (NonFiniteScore, CopyRefused) as exc:  # the sentence is the whole story
        beat.stop()
        return UnitReport(
            unit_id, job_id, _finish(sessions, unit_id, token, UnitStatus.FAILED, str(exc))
        )
    except Exception:
        if beat.lost():  # e.g. the store went away while loading the plan: not a failed fit
            return UnitReport(unit_id, job_id, LOST)
        error = traceback.format_exc()
        beat.stop()
        return UnitReport(
            unit_id, job_id, _finish(sessions, unit_id, token, UnitStatus.FAILED, error)
        )
    if beat.lost():  # given up or taken over during the last fit: write nothing
        return UnitReport(unit_id, job_id, LOST, outcome.fits)
    beat.stop()
    try:
        last = record_claimed(sessions, unit_id, token, outcome, loaded, settings, worker)
    except lifecycle.ClaimLost:
        return UnitReport(unit_id, job_id, LOST, outcome.fits)
    return UnitReport(unit_id, job_id, UnitStatus.DONE, outcome.fits, stage_complete=last)


def record_claimed(
    sessions: sessionmaker[Session],
    unit_id: int,
    token: str,
    outcome: UnitOutcome,
    loaded: LoadedPlan,
    settings: Settings,
    worker: str,
) -> bool:
    """The record transaction of claim `token`; True if it closed the stage. Fenced: raises
    lifecycle.ClaimLost, with nothing written, when the claim is no longer this copy's."""
    saved = model_file_of(outcome, settings)  # slow work before the transaction opens
    with sessions.begin() as session:
        # the fence first: it locks the unit's row, and if the claim is no longer this copy's,
        # ClaimLost rolls the whole transaction back before any score goes in
        last = lifecycle.unit_done(
            session, unit_id, token, fits=outcome.fits, seconds=outcome.seconds
        )
        unit = session.get_one(WorkUnit, unit_id)
        _record(session, unit, outcome, saved, loaded, settings, worker)
    return last


def execute_unit(
    sessions: sessionmaker[Session], unit_id: int, *, settings: Settings, worker: str
) -> UnitReport:
    """Claim, run and record unit `unit_id`; never raises for a failing fit."""
    with sessions.begin() as session:
        token = lifecycle.claim_unit(session, unit_id, worker, settings.unit_lease)
        if token is None:
            return UnitReport(unit_id, None, "skipped")
        unit = session.get_one(WorkUnit, unit_id)
        job_id = unit.job_id
        ref = ref_of(unit)
        lifecycle.start_job(session, job_id)
    # the heartbeat lives exactly as long as the unit here: it stops before this returns
    with Heartbeat(sessions, unit_id, token, settings) as beat:
        return run_claimed(sessions, unit_id, token, job_id, ref, beat, settings, worker)
