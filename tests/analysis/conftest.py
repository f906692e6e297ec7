"""One live embedded server with a few finished jobs on tables that ship with scikit-learn.

Team "lab" runs three jobs on iris: A and B on the same repeated outer folds (different
families), C on other outer folds and tagged with a schedule; team "other" runs D on wine.
"""

from __future__ import annotations

import copy
from collections.abc import Iterator
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import pytest
from api.server import Server, running_server  # tests/api/server.py: the live server helper
from sqlalchemy import update

from service.store.followup_models import Refresh, Schedule
from service.store.models import Job

IRIS_LR: dict[str, Any] = {
    "dataset": {"sample": "iris"},
    "target": "target",
    "features": None,
    "task": "classification",
    "families": [
        {"estimator": "LogisticRegression", "fixed": {"max_iter": 500}, "grid": {"C": [0.1, 1.0]}}
    ],
    "preprocess": "auto",
    "outer": {"method": "stratified_kfold", "k": 3, "repeats": 2, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 2, "seed": 1},
    "metrics": ["accuracy", "balanced_accuracy"],
    "pick_by": "accuracy",
}
SCHEDULE_ID = "lab0schedule0000000000000000001"


def _variant(**changes: Any) -> dict[str, Any]:
    request = copy.deepcopy(IRIS_LR)
    request.update(copy.deepcopy(changes))
    return request


@dataclass
class Seeded:
    """The server, tokens and the finished jobs (GET /v1/jobs/{id} bodies) by letter."""

    server: Server
    lab: str
    other: str
    analyst: str
    jobs: dict[str, dict[str, Any]]


# package scope: the server and its pool stop when this folder's tests end, instead of idling
# beside every later folder's tests on the two shared cores until the session ends
@pytest.fixture(scope="package")
def seeded(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Seeded]:
    """Start the server, run the four jobs over HTTP, tag C with a schedule and a refresh."""
    home = tmp_path_factory.mktemp("analysis-home")
    with running_server(
        home, home.parent / "analysis-server.log", FOLDWISE_LOCAL_WORKERS="2"
    ) as live:
        lab, other = live.token("lab"), live.token("other")
        analyst = live.token("review", scopes=("read",), analyst=True)
        requests = {
            ("A", lab): _variant(),
            ("B", lab): _variant(
                families=[{"estimator": "KNeighborsClassifier", "grid": {"n_neighbors": [3, 9]}}]
            ),
            ("C", lab): _variant(outer={"method": "stratified_kfold", "k": 3, "seed": 7}),
            ("D", other): _variant(
                dataset={"sample": "wine"}, outer={"method": "stratified_kfold", "k": 3, "seed": 0}
            ),
        }
        ids: dict[str, tuple[str, str]] = {}
        for (letter, token), body in requests.items():
            with live.client(token) as client:
                answer = client.post("/v1/jobs", json=body)
                assert answer.status_code == 202, answer.text
                ids[letter] = (answer.json()["id"], token)
        jobs = {}
        for letter, (job_id, token) in ids.items():
            with live.client(token) as client:
                jobs[letter] = live.wait_for_job(client, job_id)
            assert jobs[letter]["status"] == "succeeded", jobs[letter]["error"]
        # The schedule side is built elsewhere; a schedule row and one refresh written straight
        # into the store are what the query side reads. Inactive, so no tick ever fires it.
        now = datetime.now(UTC)
        with live.sessions.begin() as session:
            session.add(
                Schedule(
                    id=SCHEDULE_ID,
                    team="lab",
                    source={"sample": "iris"},
                    template={},
                    cron="0 3 * * *",
                    active=False,
                )
            )
            session.flush()
            session.execute(
                update(Job).where(Job.id == jobs["C"]["id"]).values(schedule_id=SCHEDULE_ID)
            )
            session.add(
                Refresh(
                    schedule_id=SCHEDULE_ID,
                    due_at=now,
                    trigger="manual",
                    status="reselected",
                    dataset_hash=jobs["C"]["dataset_hash"],
                    job_id=jobs["C"]["id"],
                    previous_job_id=jobs["A"]["id"],
                    finished_at=now,
                )
            )
        yield Seeded(live, lab, other, analyst, jobs)
