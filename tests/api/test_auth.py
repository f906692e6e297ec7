"""Bearer tokens: 401 without a valid one, 403 without the scope, 404 for other teams' objects."""

from __future__ import annotations

import subprocess
import sys
import uuid
from typing import Any

import httpx
import pytest

from .server import REPO, Server

ROUTES = [
    ("GET", "/v1/jobs"),
    ("POST", "/v1/jobs"),
    ("GET", "/v1/jobs/0123"),
    ("POST", "/v1/jobs/0123/cancel"),
    ("GET", "/v1/jobs/0123/fold-scores"),
    ("GET", "/v1/jobs/0123/fold-scores.csv"),
    ("GET", "/v1/datasets"),
    ("POST", "/v1/datasets"),
    ("POST", "/v1/datasets/upload"),
    ("GET", f"/v1/datasets/{'0' * 64}"),
]


def _is_problem(answer: httpx.Response, status: int) -> dict[str, Any]:
    assert answer.status_code == status, answer.text
    assert answer.headers["content-type"] == "application/problem+json"
    problem: dict[str, Any] = answer.json()
    assert problem["status"] == status and problem["title"] and problem["detail"]
    assert problem["instance"] == answer.request.url.path
    return problem


@pytest.mark.parametrize(("method", "path"), ROUTES)
def test_every_v1_route_needs_a_token(server: Server, method: str, path: str) -> None:
    with server.client() as client:
        answer = client.request(method, path, json={})
    problem = _is_problem(answer, 401)
    assert problem["type"] == "/problems/unauthenticated"
    assert answer.headers["www-authenticate"].startswith("Bearer")


@pytest.mark.parametrize("header", ["Bearer fw_not-a-real-token", "Basic dXNlcjpwYXNz", "Bearer"])
def test_a_wrong_token_is_401(server: Server, header: str) -> None:
    with httpx.Client(base_url=server.base_url, headers={"Authorization": header}) as client:
        answer = client.get("/v1/jobs")
    _is_problem(answer, 401)
    assert answer.headers["www-authenticate"].startswith("Bearer")


def test_a_read_only_token_cannot_submit_or_upload(
    server: Server, team: str, iris_request: dict[str, Any]
) -> None:
    before = server.snapshot()
    with server.client(server.token(team, ("read",))) as client:
        job = client.post("/v1/jobs", json=iris_request)
        dataset = client.post("/v1/datasets", json={"sample": "wine"})
        upload = client.post("/v1/datasets/upload", files={"file": ("a.csv", b"a,b\n1,2\n")})
        listed = client.get("/v1/jobs")
    for answer in (job, dataset, upload):
        problem = _is_problem(answer, 403)
        assert "submit" in problem["detail"]
    assert listed.status_code == 200
    assert server.snapshot() == before


def test_a_submit_only_token_cannot_read(server: Server, team: str) -> None:
    with server.client(server.token(team, ("submit",))) as client:
        _is_problem(client.get("/v1/jobs"), 403)
        _is_problem(client.get("/v1/datasets"), 403)


def test_another_teams_job_and_dataset_are_404(
    server: Server, finished_job: dict[str, Any], token: str
) -> None:
    job = finished_job["job"]
    with server.client(token) as stranger:
        for path in (
            f"/v1/jobs/{job['id']}",
            f"/v1/jobs/{job['id']}/fold-scores",
            f"/v1/jobs/{job['id']}/fold-scores.csv",
            f"/v1/datasets/{job['dataset_hash']}",
        ):
            _is_problem(stranger.get(path), 404)
        _is_problem(stranger.post(f"/v1/jobs/{job['id']}/cancel"), 404)
        listed = stranger.get("/v1/jobs").json()
        # and submitting on the other team's dataset hash is refused without telling it exists
        request = {"dataset": job["dataset_hash"]}
        by_hash = stranger.post("/v1/jobs", json=request | _rest_of_iris())
    assert job["id"] not in [j["id"] for j in listed["data"]]
    assert _is_problem(by_hash, 422)["field"] == "dataset"


def _rest_of_iris() -> dict[str, Any]:
    from .server import IRIS_REQUEST

    return {k: v for k, v in IRIS_REQUEST.items() if k != "dataset"}


def test_an_analyst_token_reads_across_teams(server: Server, finished_job: dict[str, Any]) -> None:
    job = finished_job["job"]
    analyst = server.token(f"audit-{uuid.uuid4().hex[:6]}", ("read",), analyst=True)
    with server.client(analyst) as client:
        seen = client.get(f"/v1/jobs/{job['id']}")
        listed = client.get("/v1/jobs", params={"limit": 200}).json()
        dataset = client.get(f"/v1/datasets/{job['dataset_hash']}")
        scores = client.get(f"/v1/jobs/{job['id']}/fold-scores")
        cancel = client.post(f"/v1/jobs/{job['id']}/cancel")
    assert seen.status_code == 200 and seen.json()["team"] == "owners"
    assert job["id"] in [j["id"] for j in listed["data"]]
    assert dataset.status_code == 200 and scores.status_code == 200
    _is_problem(cancel, 403)  # reading across teams is not acting for them


def test_token_create_prints_the_token_alone_and_it_works(server: Server, team: str) -> None:
    command = [sys.executable, "-m", "service.cli.main", "token", "create"]
    made = subprocess.run(
        [*command, "--team", team, "--scopes", "read"],
        env=server.env,
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert made.returncode == 0, made.stderr
    token = made.stdout.strip()
    assert made.stdout == token + "\n" and token.startswith("fw_")
    with server.client(token) as client:
        assert client.get("/v1/jobs").status_code == 200
    refused = subprocess.run(
        [*command, "--team", team, "--scopes", "read,superuser"],
        env=server.env,
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert refused.returncode == 2
    assert refused.stdout == ""
    assert "--scopes" in refused.stderr and "Traceback" not in refused.stderr
