"""Idempotency-Key on POST /v1/jobs: a repeat names the same job, another body is a 409."""

from __future__ import annotations

import uuid
from typing import Any

from sqlalchemy import func, select

from service.store.models import Job

from .server import IRIS_REQUEST as IRIS
from .server import Server


def _jobs_with_key(server: Server, key: str) -> int:
    with server.sessions() as session:
        query = select(func.count()).where(Job.idempotency_key == key)
        return int(session.scalar(query) or 0)


def test_same_key_and_body_twice_gives_the_same_job(
    server: Server, token: str, iris_request: dict[str, Any]
) -> None:
    key = uuid.uuid4().hex
    with server.client(token) as client:
        first = client.post("/v1/jobs", json=iris_request, headers={"Idempotency-Key": key})
        second = client.post("/v1/jobs", json=iris_request, headers={"Idempotency-Key": key})
    assert first.status_code == 202
    assert second.status_code == 200
    assert first.json()["id"] == second.json()["id"]
    assert first.headers["location"] == second.headers["location"]
    assert first.headers["location"] == f"/v1/jobs/{first.json()['id']}"
    assert _jobs_with_key(server, key) == 1


def test_same_key_with_another_body_is_a_conflict(
    server: Server, token: str, iris_request: dict[str, Any]
) -> None:
    key = uuid.uuid4().hex
    with server.client(token) as client:
        first = client.post("/v1/jobs", json=iris_request, headers={"Idempotency-Key": key})
        before = server.count_jobs()
        iris_request["outer"]["seed"] = 5
        clash = client.post("/v1/jobs", json=iris_request, headers={"Idempotency-Key": key})
    assert first.status_code == 202
    assert clash.status_code == 409
    assert clash.headers["content-type"] == "application/problem+json"
    problem = clash.json()
    assert problem["type"].endswith("/conflict") and "Idempotency-Key" in problem["detail"]
    assert server.count_jobs() == before
    assert _jobs_with_key(server, key) == 1


def test_another_teams_key_is_theirs_alone(
    server: Server, token: str, iris_request: dict[str, Any]
) -> None:
    """Keys are per team: B using A's key (same body or not) gets a new job of its own."""
    key = uuid.uuid4().hex
    other = server.token(f"other-{uuid.uuid4().hex[:6]}")
    with server.client(token) as mine, server.client(other) as theirs:
        first = mine.post("/v1/jobs", json=iris_request, headers={"Idempotency-Key": key})
        same = theirs.post("/v1/jobs", json=iris_request, headers={"Idempotency-Key": key})
        again = theirs.post("/v1/jobs", json=iris_request, headers={"Idempotency-Key": key})
        iris_request["outer"]["seed"] = 7
        changed = theirs.post("/v1/jobs", json=iris_request, headers={"Idempotency-Key": key})
        mine_again = mine.post("/v1/jobs", json=IRIS, headers={"Idempotency-Key": key})
    assert first.status_code == 202 and same.status_code == 202
    assert same.json()["id"] != first.json()["id"]
    assert same.json()["team"] != first.json()["team"]
    # B's own key now names B's job, and B's other body is B's own conflict, never A's
    assert again.status_code == 200 and again.json()["id"] == same.json()["id"]
    assert changed.status_code == 409 and first.json()["id"] not in changed.text
    assert mine_again.status_code == 200 and mine_again.json()["id"] == first.json()["id"]
    assert _jobs_with_key(server, key) == 2


def test_a_key_longer_than_200_characters_is_refused(
    server: Server, token: str, iris_request: dict[str, Any]
) -> None:
    before = server.count_jobs()
    with server.client(token) as client:
        answer = client.post("/v1/jobs", json=iris_request, headers={"Idempotency-Key": "k" * 201})
    assert answer.status_code == 422
    assert answer.json()["field"] == "Idempotency-Key"
    assert server.count_jobs() == before
