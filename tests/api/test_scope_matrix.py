"""Every cell of the scope matrix (README "Who may do what") over HTTP, on SQLite and PostgreSQL.

Team "alpha" owns a finished job, an audit and a schedule. Each principal below tries each action
on them (or, for creating actions, for its own team); the expected answer is the README's table.
A refused write leaves the store as it was.
"""

from __future__ import annotations

import copy
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import httpx
import pytest
from sklearn.datasets import load_iris
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.auth import MATRIX as AUTH_MATRIX
from service.auth import Action
from service.store.models import Audit, Job, Refresh, Schedule

from .server import IRIS_REQUEST, Server
from .stores import STORES, server_on

OWNER = "alpha"
# iris ships with scikit-learn (Fisher 1936); a schedule reads it from a CSV under the data root
TEMPLATE: dict[str, Any] = {
    k: v for k, v in copy.deepcopy(IRIS_REQUEST).items() if k not in ("dataset", "metrics")
} | {"metrics": ["accuracy"]}


@dataclass(frozen=True)
class Who:
    """A token's team, scopes and analyst flag, relative to the owning team."""

    team: str
    scopes: tuple[str, ...]
    analyst: bool = False


PRINCIPALS: dict[str, Who] = {
    "own read": Who(OWNER, ("read",)),
    "own submit": Who(OWNER, ("submit",)),
    "own submit,read": Who(OWNER, ("submit", "read")),
    "own admin": Who(OWNER, ("admin",)),
    "analyst read": Who("delta", ("read",), analyst=True),
    "analyst submit,read": Who("delta", ("submit", "read"), analyst=True),
    "analyst admin": Who("delta", ("admin",), analyst=True),
    "other team submit,read": Who("bravo", ("submit", "read")),
}

# The matrix: action -> principal -> status. Reading another team's object is for analysts only;
# acting on one (cancel, audit, refresh) is for nobody, and is answered like a missing object.
READ = {
    "own read": 200,
    "own submit": 403,
    "own submit,read": 200,
    "own admin": 200,
    "analyst read": 200,
    "analyst submit,read": 200,
    "analyst admin": 200,
    "other team submit,read": 404,
}


def _acting(ok: int) -> dict[str, int]:
    return {
        "own read": 403,
        "own submit": ok,
        "own submit,read": ok,
        "own admin": ok,
        "analyst read": 403,
        "analyst submit,read": 404,
        "analyst admin": 404,
        "other team submit,read": 404,
    }


def _creating(ok: int) -> dict[str, int]:
    # always for the caller's own team, so only the scope decides
    return {
        name: 403 if "submit" not in w.scopes and "admin" not in w.scopes else ok
        for name, w in PRINCIPALS.items()
    }


MATRIX: dict[str, dict[str, int]] = {
    "read job": READ,
    "read job fold scores": READ,
    "read job provenance": READ,
    "read audit": READ,
    "read schedule": READ,
    "read schedule refreshes": READ,
    "read dataset": READ,
    "cancel job": _acting(200),
    "audit job": _acting(202),
    "refresh schedule": _acting(202),
    "submit job": _creating(202),
    # a job on alpha's table by its hash: reading it is not enough to copy it into one's own team
    "submit job on alpha's own dataset hash": _acting(202)
    | {
        "analyst submit,read": 422,
        "analyst admin": 422,
        "other team submit,read": 422,
    },
    "register dataset": _creating(201),
    "create schedule": _creating(201),
}


@dataclass
class Owned:
    """The live server and alpha's objects on it."""

    server: Server
    job: dict[str, Any]
    audit_id: str
    schedule_id: str
    private_hash: str  # a table only alpha registered
    tokens: dict[str, str]


@pytest.fixture(scope="module", params=STORES)
def owned(
    request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory
) -> Iterator[Owned]:
    """A server on each store with alpha's finished job, audit and schedule, and every token."""
    roots = tmp_path_factory.mktemp("matrix-data")
    load_iris(as_frame=True).frame.to_csv(roots / "iris.csv", index=False)
    home = tmp_path_factory.mktemp(f"matrix-{request.param}")
    with server_on(request.param, home, FOLDWISE_DATA_ROOTS=str(roots)) as server:
        tokens = {
            name: server.token(w.team, w.scopes, analyst=w.analyst)
            for name, w in PRINCIPALS.items()
        }
        with server.client(server.token(OWNER)) as alpha:
            submitted = alpha.post("/v1/jobs", json=copy.deepcopy(IRIS_REQUEST))
            assert submitted.status_code == 202, submitted.text
            job = server.wait_for_job(alpha, submitted.json()["id"])
            assert job["status"] == "succeeded", job["error"]
            audit = alpha.post(f"/v1/jobs/{job['id']}/audit", json={"fraction": 0.1})
            assert audit.status_code == 202, audit.text
            schedule = alpha.post(
                "/v1/schedules",
                json={"source": {"path": "iris.csv"}, "template": TEMPLATE, "cron": "0 3 * * *"},
            )
            assert schedule.status_code == 201, schedule.text
            # iris upside down: other bytes, so a table nobody else registers by accident
            private = load_iris(as_frame=True).frame.iloc[::-1].to_csv(index=False).encode()
            uploaded = alpha.post(
                "/v1/datasets/upload", files={"file": ("alpha-private.csv", private)}
            )
            assert uploaded.status_code == 201, uploaded.text
        yield Owned(
            server,
            job,
            audit.json()["id"],
            schedule.json()["id"],
            uploaded.json()["content_hash"],
            tokens,
        )


@pytest.fixture(scope="module")
def clients(owned: Owned) -> Iterator[dict[str, httpx.Client]]:
    """One keep-alive HTTP client per principal, for all of its cells (each request still
    carries the principal's own bearer token and nothing else: the API sets no cookies)."""
    opened = {name: owned.server.client(token) for name, token in owned.tokens.items()}
    try:
        yield opened
    finally:
        for client in opened.values():
            client.close()


def _count_in(session: Session, model: Any, **where: Any) -> int:
    query = select(func.count()).select_from(model)
    for column, value in where.items():
        query = query.where(getattr(model, column) == value)
    return int(session.scalar(query) or 0)


def _count(server: Server, model: Any, **where: Any) -> int:
    with server.sessions() as session:
        return _count_in(session, model, **where)


def _attempt(action: str, client: httpx.Client, owned: Owned) -> httpx.Response:
    job_id, hash_ = owned.job["id"], owned.job["dataset_hash"]
    sid = owned.schedule_id
    calls = {
        "read job": lambda: client.get(f"/v1/jobs/{job_id}"),
        "read job fold scores": lambda: client.get(f"/v1/jobs/{job_id}/fold-scores"),
        "read job provenance": lambda: client.get(f"/v1/jobs/{job_id}/provenance"),
        "read audit": lambda: client.get(f"/v1/audits/{owned.audit_id}"),
        "read schedule": lambda: client.get(f"/v1/schedules/{sid}"),
        "read schedule refreshes": lambda: client.get(f"/v1/schedules/{sid}/refreshes"),
        "read dataset": lambda: client.get(f"/v1/datasets/{hash_}"),
        "cancel job": lambda: client.post(f"/v1/jobs/{job_id}/cancel"),
        "audit job": lambda: client.post(f"/v1/jobs/{job_id}/audit", json={"fraction": 0.1}),
        "refresh schedule": lambda: client.post(f"/v1/schedules/{sid}/refresh"),
        "submit job": lambda: client.post("/v1/jobs", json=copy.deepcopy(IRIS_REQUEST)),
        "submit job on alpha's own dataset hash": lambda: client.post(
            "/v1/jobs", json=copy.deepcopy(IRIS_REQUEST) | {"dataset": owned.private_hash}
        ),
        "register dataset": lambda: client.post("/v1/datasets", json={"sample": "wine"}),
        "create schedule": lambda: client.post(
            "/v1/schedules",
            json={"source": {"path": "iris.csv"}, "template": TEMPLATE, "cron": "0 4 * * *"},
        ),
    }
    return calls[action]()


def _footprint(owned: Owned, who: Who) -> tuple[Any, ...]:
    """What a refused action must leave alone: alpha's audits and refreshes, the caller's jobs,
    schedules and the job's status."""
    with owned.server.sessions() as session:
        return (
            _count_in(session, Audit, job_id=owned.job["id"]),
            _count_in(session, Refresh, schedule_id=owned.schedule_id),
            _count_in(session, Job, team=who.team),
            _count_in(session, Schedule, team=who.team),
            session.get_one(Job, owned.job["id"]).status,
        )


CELLS = [(action, name) for action in MATRIX for name in PRINCIPALS]


@pytest.mark.parametrize(("action", "principal"), CELLS, ids=[f"{a}-{p}" for a, p in CELLS])
def test_matrix_cell(
    owned: Owned, clients: dict[str, httpx.Client], action: str, principal: str
) -> None:
    who = PRINCIPALS[principal]
    expected = MATRIX[action][principal]
    before = _footprint(owned, who)
    answer = _attempt(action, clients[principal], owned)
    if action == "register dataset" and expected == 201:
        expected = 200 if answer.status_code == 200 else 201  # 200: the team had it already
    assert answer.status_code == expected, answer.text
    if expected >= 400:
        assert answer.headers["content-type"] == "application/problem+json"
        assert _footprint(owned, who) == before, "a refused action changed the store"
        if expected in (404, 422):
            # worded exactly as for an id or hash that does not exist
            assert "is visible to your team" in answer.json()["detail"]
        return
    body = answer.json()
    if action == "cancel job":  # a finished job stays as it was
        assert body["status"] == "succeeded"
    if action == "audit job":
        assert body["job_id"] == owned.job["id"]
        assert _count(owned.server, Audit, job_id=owned.job["id"]) == before[0] + 1
    if action == "refresh schedule":
        assert _count(owned.server, Refresh, schedule_id=owned.schedule_id) == before[1] + 1
    if action.startswith("submit job") or action == "create schedule":
        assert body["team"] == who.team  # made for the caller's own team, never another's
    if action.startswith("read") and "team" in body:
        assert body["team"] == OWNER


def test_the_readme_table_is_the_matrix_the_server_applies() -> None:
    """Each row of the README's table names an action, the scope it needs and whether analysts
    may do it to other teams' objects, exactly as service.auth.MATRIX (which the cells above
    exercise over HTTP) says."""
    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    rows = {}
    for line in readme.splitlines():
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        if len(cells) == 5 and cells[0].startswith("`") and cells[0].endswith("`"):
            rows[cells[0].strip("`")] = cells[1:]
    assert set(rows) == {a.value for a in Action}
    for action, rule in AUTH_MATRIX.items():
        scope, own, analyst, others = rows[action.value]
        assert scope == f"`{rule.scope}`"
        assert own == "yes"
        assert analyst == ("yes" if rule.analysts_across_teams else "as missing")
        assert others == "as missing"


def _slow_request() -> dict[str, Any]:
    request = copy.deepcopy(IRIS_REQUEST)
    # forests big enough that the job is still running while the analyst tries to cancel it
    request["families"] = [
        {
            "estimator": "RandomForestClassifier",
            "fixed": {"n_estimators": 300, "random_state": 0},
            "grid": {"max_depth": [2, 4, None], "min_samples_leaf": [1, 3]},
        }
    ]
    request["reuse"] = False
    return request


def test_an_analyst_cannot_cancel_another_teams_running_job(owned: Owned) -> None:
    """The reproducer: team D's analyst (submit,read) cancelling team A's running job gets the
    answer a missing job gets, and the job keeps running."""
    server = owned.server
    with (
        server.client(server.token(OWNER)) as alpha,
        server.client(owned.tokens["analyst submit,read"]) as analyst,
    ):
        job_id = alpha.post("/v1/jobs", json=_slow_request()).json()["id"]
        try:
            refused = analyst.post(f"/v1/jobs/{job_id}/cancel")
            missing_id = uuid.uuid4().hex
            missing = analyst.post(f"/v1/jobs/{missing_id}/cancel")
            seen = analyst.get(f"/v1/jobs/{job_id}").json()  # the analyst may still read it
            assert refused.status_code == 404 and missing.status_code == 404
            assert refused.json()["detail"].replace(job_id, "ID") == missing.json()[
                "detail"
            ].replace(missing_id, "ID")
            assert seen["status"] in ("queued", "running")
            with server.sessions() as session:
                stored = session.get_one(Job, job_id)
                assert not stored.cancel_requested and stored.status in ("queued", "running")
        finally:
            stopped = alpha.post(f"/v1/jobs/{job_id}/cancel")  # its own team may, and does
    assert stopped.status_code == 200 and stopped.json()["status"] == "cancelled"
