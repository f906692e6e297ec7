"""A final model is serialized before its record transaction opens, never inside it.

Serializing a large model (a forest of thousands of trees) takes minutes. Inside the record
transaction that time is "idle in transaction", which PostgreSQL ends after 60 s
(`idle_in_transaction_session_timeout`, docs/store.md): the unit then failed on every attempt and
its job with it, whatever the workers did. Here the real serializer is watched while a real job
runs on PostgreSQL: each time it runs, no connection to the job's database may sit inside an open
transaction.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import psycopg
import pytest

from service.config import load_settings
from service.jobs.handover import model_file
from service.jobs.local.driver import run_embedded

REQUEST: dict[str, Any] = {
    "dataset": {"sample": "iris"},  # shipped with scikit-learn
    "target": "target",
    "task": "classification",
    "families": [{"estimator": "LogisticRegression", "grid": {"C": [0.1, 1.0]}}],
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 2, "seed": 1},
    "metrics": ["accuracy"],
}


def test_no_transaction_is_open_while_the_final_model_is_serialized(
    tmp_path: Path, postgresql_url: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    database = postgresql_url.rsplit("/", 1)[1]
    watcher = psycopg.connect(
        f"host=127.0.0.1 port=5432 user=postgres dbname={database}", autocommit=True
    )
    seen: list[list[str]] = []
    serialize = model_file.model_bytes

    def watched(model: Any) -> bytes:
        # every other connection to the job's database that holds a transaction right now
        rows = watcher.execute(
            "SELECT state FROM pg_stat_activity WHERE datname = %s AND pid <> pg_backend_pid() "
            "AND xact_start IS NOT NULL",
            (database,),
        ).fetchall()
        seen.append([str(state) for (state,) in rows])
        return serialize(model)

    monkeypatch.setattr(model_file, "model_bytes", watched)
    settings = load_settings(
        {"FOLDWISE_HOME": str(tmp_path / "home"), "FOLDWISE_DATABASE_URL": postgresql_url}
    )
    try:
        outcome = run_embedded(REQUEST, settings=settings, workers=1)
    finally:
        watcher.close()
    assert outcome.result["final_pick"]["candidate_key"]
    assert seen, "the final refit's model was never serialized"
    assert seen == [[] for _ in seen], f"transactions open during serialization: {seen}"
