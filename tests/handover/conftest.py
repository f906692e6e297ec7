"""One live server on PostgreSQL with finished jobs on tables that ship with scikit-learn.

Team "owners" runs: a logistic regression on breast_cancer (probabilities), a linear SVM on
breast_cancer (decision values, no probabilities), a ridge regression on diabetes sliced by
`sex`, and the first job again with one more metric (reusing its folds). The jobs are small:
3 outer x 3 inner folds, two candidates each.
"""

from __future__ import annotations

import copy
import os
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import psycopg
import pytest
from api import server as live_server
from api.server import Server, running_server  # tests/api/server.py: the live server helper

from service.store.db import upgrade_database

# the same server and defaults as tests/conftest.py's per-test databases
PG_ADMIN = os.environ.get(
    "FOLDWISE_TEST_PG_ADMIN", "host=127.0.0.1 port=5432 user=postgres dbname=postgres"
)
PG_URL = os.environ.get("FOLDWISE_TEST_PG_URL", "postgresql+psycopg://postgres@127.0.0.1:5432")
_SPLITS = {
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
}
PROBA_JOB: dict[str, Any] = {
    "dataset": {"sample": "breast_cancer"},
    "target": "target",
    "task": "classification",
    # preprocess "none": the model file then holds no numpy.dtype
    # (see service/jobs/handover/model_file.py)
    "families": [
        {"estimator": "LogisticRegression", "fixed": {"max_iter": 5000}, "grid": {"C": [0.1, 1.0]}}
    ],
    "preprocess": "none",
    **_SPLITS,
    "metrics": ["accuracy", "roc_auc", "neg_log_loss"],
    "slices": ["target"],
}
LABEL_JOB: dict[str, Any] = {
    **copy.deepcopy(PROBA_JOB),
    "families": [
        {"estimator": "LinearSVC", "fixed": {"max_iter": 20000}, "grid": {"C": [0.01, 0.1]}}
    ],
    "preprocess": "auto",
    "metrics": ["accuracy", "f1", "balanced_accuracy"],
    "slices": [],
}
REGRESSION_JOB: dict[str, Any] = {
    "dataset": {"sample": "diabetes"},
    "target": "target",
    "task": "regression",
    "families": [{"estimator": "Ridge", "grid": {"alpha": [0.1, 1.0]}}],
    "preprocess": "none",
    "outer": {"method": "kfold", "k": 3, "seed": 0},
    "inner": {"method": "kfold", "k": 3, "seed": 1},
    "metrics": ["r2", "neg_mean_absolute_error", "neg_root_mean_squared_error"],
    "slices": ["sex"],
}
MORE_METRICS_JOB: dict[str, Any] = {
    **copy.deepcopy(PROBA_JOB),
    "metrics": [*PROBA_JOB["metrics"], "balanced_accuracy"],
    "slices": [],
}


# Starting the server spawns the local pool's processes, each importing scikit-learn; on a
# shared two-core machine that took 57 s once (measured), so allow more than the default minute.
live_server.START_TIMEOUT = max(live_server.START_TIMEOUT, 240.0)
live_server.JOB_TIMEOUT = max(live_server.JOB_TIMEOUT, 600.0)  # four jobs share two cores


@dataclass
class Handover:
    """The server, the owners' submit+read token and the finished jobs by name."""

    server: Server
    token: str
    jobs: dict[str, dict[str, Any]]


@pytest.fixture(scope="package")
def handover_pg() -> Iterator[str]:
    """A migrated PostgreSQL database of its own for the folder's server."""
    name = f"foldwise_handover_{uuid.uuid4().hex[:12]}"
    with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    url = f"{PG_URL}/{name}"
    upgrade_database(url)
    try:
        yield url
    finally:
        with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
            admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


# package scope: the server and its pool stop when this folder's tests end, instead of idling
# beside every later folder's tests on the two shared cores until the session ends
@pytest.fixture(scope="package")
def handover(tmp_path_factory: pytest.TempPathFactory, handover_pg: str) -> Iterator[Handover]:
    """Start the server and run the four jobs over HTTP (the last after the first)."""
    home = tmp_path_factory.mktemp("handover-home")
    with running_server(
        home,
        home.parent / "handover-server.log",
        FOLDWISE_DATABASE_URL=handover_pg,
        FOLDWISE_LOCAL_WORKERS="2",
    ) as live:
        token = live.token("owners")
        jobs: dict[str, dict[str, Any]] = {}
        with live.client(token) as client:
            started = {}
            for name, body in (
                ("proba", PROBA_JOB),
                ("labels", LABEL_JOB),
                ("regression", REGRESSION_JOB),
            ):
                answer = client.post("/v1/jobs", json=copy.deepcopy(body))
                assert answer.status_code == 202, answer.text
                started[name] = answer.json()["id"]
            for name, job_id in started.items():
                jobs[name] = live.wait_for_job(client, job_id)
                assert jobs[name]["status"] == "succeeded", jobs[name]["error"]
            answer = client.post("/v1/jobs", json=copy.deepcopy(MORE_METRICS_JOB))
            assert answer.status_code == 202, answer.text
            jobs["more_metrics"] = live.wait_for_job(client, answer.json()["id"])
            assert jobs["more_metrics"]["status"] == "succeeded", jobs["more_metrics"]["error"]
        yield Handover(live, token, jobs)
