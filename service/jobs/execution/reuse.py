"""Taking finished work from the store instead of fitting it again.

A unit's numbers are fixed by the dataset hash, its exact folds (fingerprints embed the row
indices and the versions that can change results, our scoring code's included), the candidate
key (which covers preprocessing, declared column types and the weights column) and the
metrics. So a queued unit whose every
(fold fingerprint, candidate key, metric) score is stored is marked done without a fit; one that
lacks only metrics its stored predictions allow gets them from scikit-learn's scorers on those
predictions; a final refit takes the model file of an earlier job with the same final folds.
"""

from __future__ import annotations

import math
from collections import Counter
from pathlib import Path
from typing import Any

from sqlalchemy import select, update
from sqlalchemy.orm import Session

from service.cv.halving_race import pick_for
from service.cv.predictions import StoredPredictions, score_stored
from service.cv.scopes import FINAL_SCOPE
from service.cv.units import ref_of, unit_folds
from service.jobs import lifecycle
from service.jobs.execution.plans import LoadedPlan
from service.jobs.execution.scores import load_book
from service.store.db import insert_ignoring_duplicates
from service.store.models import FinalModel, FoldPrediction, FoldScore, Job, JobFold, WorkUnit
from service.store.statuses import UnitStatus

# written beside scores computed from stored predictions rather than by a fit
FROM_PREDICTIONS = "stored-predictions"


def _stored_scores(
    session: Session, loaded: LoadedPlan, fingerprints: set[str], keys: set[str]
) -> dict[tuple[str, str, str], str]:
    rows = session.execute(
        select(
            FoldScore.fold_fingerprint, FoldScore.candidate_key, FoldScore.metric, FoldScore.job_id
        ).where(
            FoldScore.dataset_hash == loaded.dataset_hash,
            FoldScore.fold_fingerprint.in_(sorted(fingerprints)),
            FoldScore.candidate_key.in_(sorted(keys)),
            FoldScore.metric.in_(loaded.plan.spec.metrics),
        )
    )
    return {(fp, key, metric): job_id for fp, key, metric, job_id in rows}


def _from_predictions(
    session: Session, loaded: LoadedPlan, unit: WorkUnit, missing: list[tuple[str, str]]
) -> tuple[list[dict[str, Any]], str] | None:
    """Score rows for the missing (fingerprint, metric) pairs from stored predictions, if all
    can be computed that way; with the job that stored the predictions."""
    plan = loaded.plan
    wanted: dict[str, list[str]] = {}
    for fingerprint, metric in missing:
        wanted.setdefault(fingerprint, []).append(metric)
    found = {
        p.fold_fingerprint: p
        for p in session.scalars(
            select(FoldPrediction).where(
                FoldPrediction.dataset_hash == loaded.dataset_hash,
                FoldPrediction.candidate_key == unit.candidate_key,
                FoldPrediction.fold_fingerprint.in_(sorted(wanted)),
            )
        )
    }
    if set(found) != set(wanted):
        return None
    folds = {f.fingerprint: f for f in unit_folds(plan, ref_of(unit))}
    rows, sources = [], Counter[str]()
    for fingerprint, metrics in wanted.items():
        stored = found[fingerprint]
        predictions = StoredPredictions.decode(stored.data, plan.spec.task, stored.classes)
        fold = folds[fingerprint]
        # the candidate key names the weights column, so these are the same weights
        weights = None if plan.weights is None else plan.weights[fold.test]
        scores = score_stored(predictions, plan.y[fold.test], metrics, weights)
        if scores is None or not all(math.isfinite(v) for v in scores.values()):
            # a metric needs a response these predictions do not have, or is not a number
            # there: refit, and let the unit say what failed (service/cv/units.check_finite)
            return None
        sources[stored.job_id] += 1
        rows += [
            {
                "dataset_hash": loaded.dataset_hash,
                "fold_fingerprint": fingerprint,
                "candidate_key": unit.candidate_key,
                "metric": metric,
                "value": value,
                "fit_seconds": 0.0,
                "score_seconds": 0.0,
                "n_train": len(fold.train),
                "n_test": len(fold.test),
                "seed": None,
                "versions": plan.versions,
                "worker": FROM_PREDICTIONS,
                "job_id": unit.job_id,
                "unit_id": unit.id,
            }
            for metric, value in scores.items()
        ]
    return rows, sources.most_common(1)[0][0]


def _earlier_model(session: Session, loaded: LoadedPlan, candidate_key: str) -> FinalModel | None:
    """A final model of another job on this table with the same final folds and candidate."""
    final_prints = sorted(f.fingerprint for f in loaded.plan.inner[FINAL_SCOPE])
    same_folds = (
        select(JobFold.job_id)
        .where(JobFold.role == "final_inner", JobFold.fingerprint.in_(final_prints))
        .group_by(JobFold.job_id)
    )
    candidates = session.scalars(
        select(FinalModel)
        .join(Job, Job.id == FinalModel.job_id)
        .where(
            Job.dataset_hash == loaded.dataset_hash,
            FinalModel.candidate_key == candidate_key,
            FinalModel.job_id.in_(same_folds),
        )
        .order_by(FinalModel.created_at)
    )
    return next((m for m in candidates if Path(m.path).is_file()), None)


def reuse_stored(session: Session, job_id: str, loaded: LoadedPlan) -> int:
    """Mark the job's queued units that the store already answers as done; returns how many."""
    units = list(
        session.scalars(
            select(WorkUnit).where(WorkUnit.job_id == job_id, WorkUnit.status == UnitStatus.QUEUED)
        )
    )
    scored = [u for u in units if u.kind != "final_refit"]
    fingerprints = {f.fingerprint for u in scored for f in unit_folds(loaded.plan, ref_of(u))}
    have = _stored_scores(session, loaded, fingerprints, {u.candidate_key for u in scored})
    metrics = loaded.plan.spec.metrics
    reused = 0
    for unit in units:
        if unit.kind == "final_refit":
            model = _earlier_model(session, loaded, unit.candidate_key)
            if model is None:
                continue
            final = pick_for(loaded.plan, FINAL_SCOPE, load_book(session, loaded))
            insert_ignoring_duplicates(
                session,
                FinalModel,
                [
                    {
                        "job_id": job_id,
                        "candidate_key": unit.candidate_key,
                        "sha256": model.sha256,
                        "path": model.path,
                        "size_bytes": model.size_bytes,
                        "inner_mean": final.inner_mean,
                    }
                ],
            )
            lifecycle.unit_reused(unit, model.job_id)
            reused += 1
            continue
        keys = [
            (f.fingerprint, unit.candidate_key, m)
            for f in unit_folds(loaded.plan, ref_of(unit))
            for m in metrics
        ]
        missing = [(key[0], key[2]) for key in keys if key not in have]
        if not missing:
            lifecycle.unit_reused(unit, Counter(have[k] for k in keys).most_common(1)[0][0])
            reused += 1
            continue
        served = _from_predictions(session, loaded, unit, missing)
        if served is not None:
            rows, source = served
            insert_ignoring_duplicates(session, FoldScore, rows)
            lifecycle.unit_reused(unit, source)
            reused += 1
    if reused:
        session.execute(
            update(Job).where(Job.id == job_id).values(units_done=Job.units_done + reused)
        )
    return reused
