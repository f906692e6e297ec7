"""Minimal valid rows for the store tables, so each test only spells out what it is about."""

from __future__ import annotations

import uuid
from typing import Any

from sqlalchemy.orm import Session

from service.store.models import Candidate, Dataset, Fold, Job

DATASET_HASH = "d" * 64
CANDIDATE_KEY = "c" * 64
FINGERPRINT = "f" * 64


def add_job(session: Session, **overrides: Any) -> Job:
    """A dataset, a candidate, a fold and a queued job over them; returns the job."""
    if session.get(Dataset, 1) is None:
        session.add(
            Dataset(
                id=1,
                content_hash=DATASET_HASH,
                n_rows=10,
                n_columns=2,
                columns=[{"name": "x", "kind": "numeric"}, {"name": "y", "kind": "numeric"}],
                origin={"sample": "iris"},
            )
        )
        session.add(
            Candidate(
                candidate_key=CANDIDATE_KEY,
                estimator="LogisticRegression",
                params={"C": 1.0},
                preprocess="auto",
            )
        )
        session.add(
            Fold(
                fingerprint=FINGERPRINT,
                dataset_hash=DATASET_HASH,
                n_train=8,
                n_test=2,
                train_mask=b"\xff\x00",
                test_mask=b"\x00\xc0",
                versions={"scikit-learn": "1.9.1"},
            )
        )
        session.flush()
    fields: dict[str, Any] = {
        "id": uuid.uuid4().hex,
        "dataset_hash": DATASET_HASH,
        "status": "queued",
        "request": {"target": "y"},
    }
    job = Job(**(fields | overrides))
    session.add(job)
    session.flush()
    return job


def score_row(job_id: str, metric: str = "accuracy", value: float = 0.9) -> dict[str, Any]:
    """One fold_score row as insert_ignoring_duplicates takes it."""
    return {
        "dataset_hash": DATASET_HASH,
        "fold_fingerprint": FINGERPRINT,
        "candidate_key": CANDIDATE_KEY,
        "metric": metric,
        "value": value,
        "fit_seconds": 0.01,
        "score_seconds": 0.001,
        "n_train": 8,
        "n_test": 2,
        "seed": None,
        "versions": {"scikit-learn": "1.9.1"},
        "worker": "test",
        "job_id": job_id,
        "unit_id": None,
    }
