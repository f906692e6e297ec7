"""A job's whole trail, read from the store: table, request, candidates, folds, units, scores,
final model and audits.

Scores are shared across teams by content (the same table, fold and candidate give the same
number), so a trail can point at other teams' jobs; for a caller who may not read those teams,
their job ids are left out and the entry says "another team's job", and only the caller's own
team's registration of the table is shown.
"""

from __future__ import annotations

import json
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.auth import Action, Principal, reaches_every_team
from service.jobs.handover.fold_rows import fold_place, interval_k, reader_role
from service.jobs.queries.jobs import OTHER_TEAM, foreign_job_ids
from service.store.followup_models import Audit
from service.store.models import (
    Candidate,
    Dataset,
    DatasetRegistration,
    FinalModel,
    Fold,
    FoldScore,
    Job,
    JobCandidate,
    JobFold,
    WorkUnit,
)


def _when(moment: Any) -> str | None:
    return moment.isoformat() if moment is not None else None


def _dataset(session: Session, job: Job, principal: Principal) -> dict[str, Any]:
    dataset = session.scalars(select(Dataset).where(Dataset.content_hash == job.dataset_hash)).one()
    registrations = list(
        session.scalars(
            select(DatasetRegistration)
            .where(DatasetRegistration.content_hash == job.dataset_hash)
            .order_by(DatasetRegistration.created_at)
        )
    )
    everyone = reaches_every_team(principal, Action.READ)
    shown = [r for r in registrations if everyone or r.team == principal.team]
    # the origin of the job's team's copy: another team may have brought the same bytes first
    own = next((r for r in registrations if r.team == job.team), None)
    stored_at = dataset.created_at if everyone else (own.created_at if own else None)
    return {
        "content_hash": dataset.content_hash,
        "n_rows": dataset.n_rows,
        "n_columns": dataset.n_columns,
        "origin": (own.origin if own else None) or {},
        "registered_by": [r.team for r in shown],
        "stored_at": _when(stored_at),
    }


def _candidates(session: Session, job_id: str) -> list[dict[str, Any]]:
    rows = session.execute(
        select(JobCandidate.position, Candidate)
        .join(Candidate, Candidate.candidate_key == JobCandidate.candidate_key)
        .where(JobCandidate.job_id == job_id)
        .order_by(JobCandidate.position)
    )
    return [
        {
            "position": position,
            "candidate_key": c.candidate_key,
            "estimator": c.estimator,
            "params": c.params,
            "preprocess": c.preprocess,
        }
        for position, c in rows
    ]


def _folds(session: Session, job_id: str) -> list[dict[str, Any]]:
    rows = session.execute(
        select(JobFold, Fold)
        .join(Fold, Fold.fingerprint == JobFold.fingerprint)
        .where(JobFold.job_id == job_id)
        .order_by(JobFold.role, JobFold.scope, JobFold.repeat, JobFold.fold_index)
    ).all()
    k = interval_k([jf for jf, _ in rows])
    return [
        {
            "fingerprint": jf.fingerprint,
            # a nested interval's procedure folds and a halving search's round folds say so;
            # scope, repeat and fold stay the stored ones, which the units' scopes name, and
            # `interval` / `halving` number them as the interval and the search do
            "role": reader_role(jf),
            "scope": jf.scope,
            "repeat": jf.repeat,
            "fold": jf.fold_index,
            "n_train": fold.n_train,
            "n_test": fold.n_test,
            "versions": fold.versions,
            **_interval_place(jf, k),
            **_halving_place(jf, k),
        }
        for jf, fold in rows
    ]


def _interval_place(fold: JobFold, k: int) -> dict[str, Any]:
    """{'interval': {repetition, fold, part}} for a nested interval's fold, nothing otherwise."""
    place = fold_place(fold, k)
    if place["interval_part"] is None:
        return {}
    return {
        "interval": {
            "repetition": place["repeat"],
            "fold": place["fold"],
            "part": place["interval_part"],
        }
    }


def _halving_place(fold: JobFold, k: int) -> dict[str, Any]:
    """{'halving': {round, inner_repeat}} for a halving search's round fold, nothing otherwise."""
    place = fold_place(fold, k)
    if place["halving_round"] is None:
        return {}
    return {"halving": {"round": place["halving_round"], "inner_repeat": place["inner_repeat"]}}


def _units(session: Session, job_id: str, hidden: set[str]) -> list[dict[str, Any]]:
    units = session.scalars(select(WorkUnit).where(WorkUnit.job_id == job_id).order_by(WorkUnit.id))
    return [
        {
            "id": u.id,
            "kind": u.kind,
            "scope": u.scope,
            "candidate_key": u.candidate_key,
            # a halving search runs a scope's candidates once per round they are kept for
            "halving_round": u.halving_round,
            "status": u.status,
            "worker": u.worker,
            "attempts": u.attempts,
            "fits": u.fits,
            "seconds": u.seconds,
            "reused": u.reused,
            "source_job_id": None if u.source_job_id in hidden else u.source_job_id,
            **({"source": OTHER_TEAM} if u.source_job_id in hidden else {}),
            "created_at": _when(u.created_at),
            "started_at": _when(u.started_at),
            "finished_at": _when(u.finished_at),
        }
        for u in units
    ]


def _score_summary(session: Session, job: Job, principal: Principal) -> list[dict[str, Any]]:
    """The job's scores grouped by who computed them: job, worker and versions."""
    folds = select(JobFold.fingerprint).where(JobFold.job_id == job.id)
    keys = select(JobCandidate.candidate_key).where(JobCandidate.job_id == job.id)
    # versions are JSON, which neither store groups by portably: count them here
    merged: dict[tuple[str, str, str], dict[str, Any]] = {}
    counts = session.execute(
        select(FoldScore.job_id, FoldScore.worker, FoldScore.versions).where(
            FoldScore.dataset_hash == job.dataset_hash,
            FoldScore.fold_fingerprint.in_(folds),
            FoldScore.candidate_key.in_(keys),
        )
    )
    rows = list(counts)
    hidden = foreign_job_ids(session, principal, {job_id for job_id, _, _ in rows})
    for job_id, worker, versions in rows:
        shown = None if job_id in hidden else job_id
        key = (shown or "", worker, json.dumps(versions, sort_keys=True))
        entry = merged.setdefault(
            key,
            {
                "job_id": shown,
                "computed_by": OTHER_TEAM if shown is None else "job",
                "worker": worker,
                "versions": versions,
                "scores": 0,
            },
        )
        entry["scores"] += 1
    return sorted(merged.values(), key=lambda e: (e["job_id"] or "", e["worker"]))


def _final_model(session: Session, job_id: str) -> dict[str, Any] | None:
    model = session.get(FinalModel, job_id)
    if model is None:
        return None
    return {
        "candidate_key": model.candidate_key,
        "sha256": model.sha256,
        "path": model.path,
        "size_bytes": model.size_bytes,
        "inner_mean": model.inner_mean,
        "stored_at": _when(model.created_at),
    }


def _audits(session: Session, job_id: str) -> list[dict[str, Any]]:
    audits = session.scalars(select(Audit).where(Audit.job_id == job_id).order_by(Audit.created_at))
    out = []
    for audit in audits:
        report = audit.report or {}
        out.append(
            {
                "id": audit.id,
                "status": audit.status,
                "fraction": audit.fraction,
                "seed": audit.seed,
                "tolerance": audit.tolerance,
                "created_at": _when(audit.created_at),
                "finished_at": _when(audit.finished_at),
                **{
                    k: report.get(k)
                    for k in ("scores_checked", "identical", "within_tolerance", "differing")
                },
            }
        )
    return out


def provenance(session: Session, job: Job, principal: Principal) -> dict[str, Any]:
    """The whole trail of a job, as GET /v1/jobs/{id}/provenance shows it to `principal`."""
    sources = set(
        session.scalars(
            select(WorkUnit.source_job_id).where(
                WorkUnit.job_id == job.id, WorkUnit.source_job_id.is_not(None)
            )
        )
    )
    hidden = foreign_job_ids(session, principal, {s for s in sources if s})
    return {
        "job": {
            "id": job.id,
            "status": job.status,
            "team": job.team,
            "created_at": _when(job.created_at),
            "started_at": _when(job.started_at),
            "finished_at": _when(job.finished_at),
        },
        "dataset": _dataset(session, job, principal),
        "request": job.request,
        "candidates": _candidates(session, job.id),
        "folds": _folds(session, job.id),
        "units": _units(session, job.id, hidden),
        "fold_scores": _score_summary(session, job, principal),
        "final_model": _final_model(session, job.id),
        "audits": _audits(session, job.id),
    }
