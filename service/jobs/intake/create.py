"""Writing a prepared job to the store: dataset, candidates, folds and its first units."""

from __future__ import annotations

import uuid
from typing import Any

import numpy as np
from sqlalchemy import insert
from sqlalchemy.orm import Session

from service.config import Settings
from service.cv.halving_race import inner_unit_count
from service.cv.interval_folds import shared_with_outer
from service.cv.scopes import FINAL_SCOPE, parse_outer_scope
from service.cv.splits import Fold as PlanFold
from service.cv.units import inner_units
from service.datasets.store import keep_table
from service.jobs.execution.plans import LoadedPlan
from service.jobs.execution.reuse import reuse_stored
from service.jobs.intake.prepare import PreparedJob
from service.store.db import insert_ignoring_duplicates
from service.store.models import Candidate, Dataset, Fold, Job, JobCandidate, JobFold, WorkUnit
from service.store.statuses import JobStatus, UnitStatus


def _mask(indices: np.ndarray, n_rows: int) -> bytes:
    member = np.zeros(n_rows, dtype=bool)
    member[indices] = True
    return np.packbits(member).tobytes()


def _fold_row(fold: PlanFold, dataset_hash: str, n_rows: int, versions: dict[str, str]) -> dict:
    return {
        "fingerprint": fold.fingerprint,
        "dataset_hash": dataset_hash,
        "n_train": len(fold.train),
        "n_test": len(fold.test),
        "train_mask": _mask(fold.train, n_rows),
        "test_mask": _mask(fold.test, n_rows),
        "versions": versions,
    }


def _job_fold_rows(job_id: str, prepared: PreparedJob) -> list[dict[str, Any]]:
    # `scope` names the rows a fold splits: all rows for outer and final inner folds, an outer
    # fold's training part (by that fold's scope) for inner folds
    plan = prepared.plan
    rows = []
    # a nested interval's procedure folds are outer folds of their own (repeats from
    # scopes.INTERVAL_REPEAT_BASE up), so their inner folds find their parent like any other
    for outer in plan.outer + plan.interval_folds:
        rows.append(
            {
                "job_id": job_id,
                "role": "outer",
                "scope": FINAL_SCOPE,
                "repeat": outer.repeat,
                "fold_index": outer.index,
                "fingerprint": outer.fingerprint,
                "parent_repeat": None,
                "parent_fold": None,
            }
        )
    # a halving search's round folds sit beside the scope's inner folds (scopes.round_repeat)
    by_scope = {
        scope: folds + [f for cut in plan.rounds.get(scope, []) for f in cut]
        for scope, folds in plan.inner.items()
    }
    for scope, folds in by_scope.items():
        parent = None if scope == FINAL_SCOPE else plan.outer_fold(scope)
        for fold in folds:
            rows.append(
                {
                    "job_id": job_id,
                    "role": "final_inner" if parent is None else "inner",
                    "scope": scope,
                    "repeat": fold.repeat,
                    "fold_index": fold.index,
                    "fingerprint": fold.fingerprint,
                    "parent_repeat": parent.repeat if parent else None,
                    "parent_fold": parent.index if parent else None,
                }
            )
    return rows


def unit_row(
    job_id: str, kind: str, scope: str, candidate_key: str, halving_round: int = 0
) -> dict[str, Any]:
    """A queued work unit row; outer coordinates follow from the scope."""
    repeat = fold = None
    if scope != FINAL_SCOPE:
        repeat, fold = parse_outer_scope(scope)
    return {
        "job_id": job_id,
        "kind": kind,
        "scope": scope,
        "outer_repeat": repeat,
        "outer_fold": fold,
        "candidate_key": candidate_key,
        "halving_round": halving_round,
        "status": UnitStatus.QUEUED,
    }


def create_job(
    session: Session,
    prepared: PreparedJob,
    settings: Settings,
    *,
    idempotency_key: str | None = None,
    team: str = "local",
) -> str:
    """Store the job with its dataset, candidates, folds and inner units; returns its id.

    The caller commits: the job and its units become visible together, and only then are units
    dispatched (a crash in between leaves queued units that a reconciler can find).
    """
    table, plan = prepared.table, prepared.plan
    keep_table(session, table.frame, table.content_hash, settings)
    insert_ignoring_duplicates(
        session,
        Dataset,
        [
            {
                "content_hash": table.content_hash,
                "n_rows": len(table.frame),
                "n_columns": table.frame.shape[1],
                "columns": [{"name": n, "kind": k} for n, k in table.kinds.items()],
                "origin": dict(table.origin),
            }
        ],
    )
    insert_ignoring_duplicates(
        session,
        Candidate,
        [
            {
                "candidate_key": c.key,
                "estimator": c.estimator,
                "params": c.params,
                "preprocess": c.preprocess,
            }
            for c in plan.candidates
        ],
    )
    folds = plan.outer + plan.interval_folds + [f for group in plan.inner.values() for f in group]
    folds += [f for rounds in plan.rounds.values() for cut in rounds for f in cut]
    insert_ignoring_duplicates(
        session, Fold, [_fold_row(f, table.content_hash, plan.n_rows, plan.versions) for f in folds]
    )
    job_id = uuid.uuid4().hex
    # a procedure fold that is one of the job's outer folds shares their units (interval_folds)
    shared = shared_with_outer(plan.outer, plan.interval_folds)
    first_units = [u for u in inner_units(plan) if u.scope not in shared]
    session.add(
        Job(
            id=job_id,
            dataset_hash=table.content_hash,
            status=JobStatus.QUEUED,
            stage="inner",
            request=prepared.request.model_dump(mode="json"),
            units_total=inner_unit_count(plan, len(first_units))
            + len(plan.scopes)
            - len(shared),  # a refit per scope
            idempotency_key=idempotency_key,
            team=team,  # set before the flush: the idempotency key is unique per team
        )
    )
    session.flush()
    session.add_all(
        JobCandidate(job_id=job_id, position=c.position, candidate_key=c.key)
        for c in plan.candidates
    )
    session.execute(insert(JobFold), _job_fold_rows(job_id, prepared))
    session.execute(
        insert(WorkUnit),
        [unit_row(job_id, u.kind, u.scope, u.candidate_key) for u in first_units],
    )
    if prepared.request.reuse:
        # units the store already answers are done now; if all are, the caller must call
        # intake.start.start_submitted after its commit (no unit will finish to trigger the fan-in)
        loaded = LoadedPlan(plan, table.frame, dict(table.kinds), table.content_hash)
        reuse_stored(session, job_id, loaded)
    return job_id
