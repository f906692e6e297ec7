"""Idempotency-Key on POST /v1/jobs: a repeat names the same job, another body is a 409."""

from __future__ import annotations

import uuid
from typing import Any

from sqlalchemy import func, select

from service.store.models import Job

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


def test_another_team_reusing_a_key_is_a_conflict(
    server: Server, token: str, iris_request: dict[str, Any]
) -> None:
    key = uuid.uuid4().hex
    other = server.token(f"other-{uuid.uuid4().hex[:6]}")
    with server.client(token) as mine, server.client(other) as theirs:
        assert mine.post("/v1/jobs", json=iris_request, headers={"Idempotency-Key": key}).is_success
        clash = theirs.post("/v1/jobs", json=iris_request, headers={"Idempotency-Key": key})
    # 409 and not the first team's job: a key must not leak another team's job id
    assert clash.status_code == 409
    assert "id" not in clash.json()


def test_a_key_longer_than_200_characters_is_refused(
    server: Server, token: str, iris_request: dict[str, Any]
) -> None:
    before = server.count_jobs()
    with server.client(token) as client:
        answer = client.post("/v1/jobs", json=iris_request, headers={"Idempotency-Key": "k" * 201})
    assert answer.status_code == 422
    assert answer.json()["field"] == "Idempotency-Key"
    assert server.count_jobs() == before
