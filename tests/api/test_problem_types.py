"""Every RFC 9457 `type` the server sends names a page that the same server serves."""

from __future__ import annotations

from typing import Any
from urllib.parse import urljoin

import httpx

from service.http.problems import PROBLEM_TYPES

from .server import Server


def _provoke_problems(server: Server, token: str, reader: str) -> list[httpx.Response]:
    """One live request per problem status a client can cause on purpose."""
    json_type = {"content-type": "application/json"}
    with (
        server.client(token) as client,
        server.client(reader) as read_only,
        server.client() as anonymous,
    ):
        return [
            client.post("/v1/jobs", content=b"{not json", headers=json_type),  # 400
            anonymous.get("/v1/jobs"),  # no token: 401
            read_only.post("/v1/jobs", json={}),  # read-only token submitting: 403
            client.get("/v1/jobs/00000000-0000-0000-0000-000000000000"),  # 404
            client.post("/v1/jobs", content=b"x" * (2 << 20)),  # over the body cap: 413
            client.post("/v1/jobs", json={"dataset": 1}),  # 422
            client.delete("/healthz"),  # 405: about:blank
        ]


def test_every_emitted_type_resolves_to_a_page(server: Server, team: str) -> None:
    token = server.token(team)
    reader = server.token(team, scopes=("read",))
    answers = _provoke_problems(server, token, reader)
    statuses = [a.status_code for a in answers]
    assert statuses == [400, 401, 403, 404, 413, 422, 405]
    with server.client() as client:
        for answer in answers:
            problem: dict[str, Any] = answer.json()
            assert answer.headers["content-type"] == "application/problem+json"
            if problem["type"] == "about:blank":  # RFC 9457 section 4.2.1: status says it all
                assert answer.status_code == 405
                continue
            assert problem["type"].startswith("/problems/"), problem
            page = client.get(urljoin(str(answer.url), problem["type"]))
            assert page.status_code == 200, problem["type"]
            assert page.headers["content-type"].startswith("text/html")
            assert problem["title"] in page.text


def test_each_registered_type_has_its_page_in_the_openapi_document(server: Server) -> None:
    with server.client() as client:
        paths = client.get("/openapi.json").json()["paths"]
        index = client.get("/problems/")
        assert index.status_code == 200
        assert len({kind.status for kind in PROBLEM_TYPES}) == len(PROBLEM_TYPES)
        for kind in PROBLEM_TYPES:
            assert kind.uri in paths and "get" in paths[kind.uri]
            assert f'href="{kind.uri}"' in index.text
            page = client.get(kind.uri)
            assert page.status_code == 200
            assert f"HTTP status {kind.status}" in page.text and kind.title in page.text
