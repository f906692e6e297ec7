"""Shared pieces of the reuse and audit tests: a small iris request and a store to run it on."""

from __future__ import annotations

import copy
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings, load_settings
from service.store.db import make_engine, make_session_factory, upgrade_database
from service.store.models import FoldScore

# iris ships with scikit-learn (Fisher 1936); 3 outer x 3 inner folds keep every job a few seconds
BASE_REQUEST: dict[str, Any] = {
    "dataset": {"sample": "iris"},
    "target": "target",
    "task": "classification",
    "families": [
        {"estimator": "LogisticRegression", "fixed": {"max_iter": 500}, "grid": {"C": [0.1, 1.0]}}
    ],
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
    "metrics": ["accuracy"],
}


def make_request(**changes: Any) -> dict[str, Any]:
    """A fresh copy of the base request with top-level fields replaced."""
    request = copy.deepcopy(BASE_REQUEST)
    request.update(copy.deepcopy(changes))
    return request


def with_grid(values: list[float]) -> list[dict[str, Any]]:
    """The base family with another C grid."""
    family = copy.deepcopy(BASE_REQUEST["families"][0])
    family["grid"] = {"C": values}
    return [family]


@pytest.fixture
def pg_settings(tmp_path: Path, postgresql_url: str) -> Settings:
    """Settings on a fresh PostgreSQL database (migrated) with a home folder of its own."""
    settings = load_settings(
        {"FOLDWISE_HOME": str(tmp_path / "home"), "FOLDWISE_DATABASE_URL": postgresql_url}
    )
    upgrade_database(settings.database_url)
    return settings


@pytest.fixture
def pg_sessions(pg_settings: Settings) -> Any:
    """Sessions on that database, to look at what the store holds."""
    engine = make_engine(pg_settings.database_url)
    yield make_session_factory(engine)
    engine.dispose()


def count_scores(sessions: sessionmaker[Session]) -> int:
    """Rows in fold_score."""
    with sessions() as session:
        return int(session.scalar(select(func.count()).select_from(FoldScore)) or 0)
