"""A catalogue of hostile inputs against the live server, as a team sharing it might send.

Injection strings in every id and query parameter, other teams' ids, huge values, deep nesting,
a 10 MB body, NaN and Infinity, wrong content types; then a burst of concurrent requests. The
server must never answer 5xx, every refusal must be a problem document with a sentence,
nothing may be stored by a refused request, and the server must still answer afterwards.
"""

from __future__ import annotations

import copy
import json
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

import httpx
import pytest

from .server import IRIS_REQUEST, Server
from .stores import server_on

INJECTIONS = [
    "' OR '1'='1",
    "1; DROP TABLE job; --",
    "../../../../etc/passwd",
    "%2e%2e%2f%2e%2e%2fetc%2fpasswd",
    "<script>alert(1)</script>",
    "${jndi:ldap://127.0.0.1/x}",
    "\u202eevil",
    "a" * 5_000,
    "😀" * 100,
    "\\x00",
]

# every id in a path and every free-text query parameter of the API
ID_PATHS = [
    "/v1/jobs/{x}",
    "/v1/jobs/{x}/fold-scores",
    "/v1/jobs/{x}/fold-scores.csv",
    "/v1/jobs/{x}/fold-scores.parquet",
    "/v1/jobs/{x}/provenance",
    "/v1/jobs/{x}/model",
    "/v1/jobs/{x}/model-card",
    "/v1/jobs/{x}/model-card.md",
    "/v1/jobs/{x}/predictions",
    "/v1/jobs/{x}/predictions.csv",
    "/v1/jobs/{x}/predictions.parquet",
    "/v1/audits/{x}",
    "/v1/schedules/{x}",
    "/v1/schedules/{x}/refreshes",
    "/v1/datasets/{x}",
    "/v1/datasets/{x}/jobs",
    "/v1/datasets/{x}/fold-scores",
    "/v1/datasets/{x}/history",
]
ID_POSTS = ["/v1/jobs/{x}/cancel", "/v1/jobs/{x}/audit", "/v1/schedules/{x}/refresh"]
QUERIES = [
    ("/v1/jobs", "dataset_hash"),
    ("/v1/jobs", "status"),
    ("/v1/jobs", "estimator"),
    ("/v1/jobs", "schedule_id"),
    ("/v1/jobs", "created_after"),
    ("/v1/jobs", "limit"),
    ("/v1/jobs", "offset"),
    ("/v1/datasets", "limit"),
    ("/v1/schedules", "offset"),
    ("/v1/compare", "jobs"),
    ("/v1/jobs/{job}/fold-scores", "after"),
    ("/v1/jobs/{job}/predictions", "after"),
    ("/v1/jobs/{job}/predictions", "limit"),
    ("/v1/datasets/{dataset}/fold-scores", "candidate_key"),
    ("/v1/datasets/{dataset}/fold-scores", "metric"),
    ("/v1/datasets/{dataset}/fold-scores", "role"),
]


def _refused_or_empty(answer: httpx.Response) -> None:
    """No 5xx; a refusal is a problem document whose detail is a sentence."""
    assert answer.status_code < 500, f"{answer.request.url}: {answer.status_code} {answer.text}"
    if answer.status_code >= 400:
        assert answer.headers["content-type"] == "application/problem+json", answer.text
        problem = answer.json()
        assert problem["status"] == answer.status_code
        assert problem["detail"].endswith(".") and "Traceback" not in problem["detail"]


def _check_unchanged(server: Server, before: Any) -> None:
    assert server.snapshot() == before
    with server.client() as client:
        assert client.get("/healthz").status_code == 200


def test_injection_strings_in_every_id_and_query_parameter(
    server: Server, finished_job: dict[str, Any]
) -> None:
    job = finished_job["job"]
    before = server.snapshot()
    with server.client(finished_job["token"]) as client:
        for text in INJECTIONS:
            quoted = httpx.URL("/").copy_with(path="/" + text).raw_path.decode()[1:]
            for path in ID_PATHS:
                _refused_or_empty(client.get(path.format(x=quoted)))
            for path in ID_POSTS:
                _refused_or_empty(client.post(path.format(x=quoted), json={}))
            for route, name in QUERIES:
                path = route.format(job=job["id"], dataset=job["dataset_hash"])
                _refused_or_empty(client.get(path, params={name: text}))
    _check_unchanged(server, before)


def test_other_teams_ids_are_not_found(server: Server, finished_job: dict[str, Any]) -> None:
    job = finished_job["job"]
    stranger = server.token("strangers")
    before = server.snapshot()
    with server.client(stranger) as client:
        answers = [
            client.get(f"/v1/jobs/{job['id']}"),
            client.get(f"/v1/jobs/{job['id']}/fold-scores"),
            client.get(f"/v1/jobs/{job['id']}/provenance"),
            client.post(f"/v1/jobs/{job['id']}/cancel"),
            client.get(f"/v1/datasets/{job['dataset_hash']}"),
            client.get(f"/v1/datasets/{job['dataset_hash']}/jobs"),
            client.post("/v1/jobs", json={**IRIS_REQUEST, "dataset": job["dataset_hash"]}),
        ]
        listing = client.get("/v1/jobs").json()
    for answer in answers[:-1]:
        _refused_or_empty(answer)
        assert answer.status_code == 404, answer.text
    _refused_or_empty(answers[-1])
    assert answers[-1].status_code == 422 and answers[-1].json()["field"] == "dataset"
    assert listing == {"data": [], "count": 0}
    _check_unchanged(server, before)


def _request_with(**changes: Any) -> dict[str, Any]:
    request = copy.deepcopy(IRIS_REQUEST)
    for dotted, value in changes.items():
        node: Any = request
        *parents, last = dotted.split("__")
        for part in parents:
            node = node[int(part)] if part.isdigit() else node[part]
        node[last] = value
    return request


def _nested(depth: int) -> str:
    return "[" * depth + "]" * depth


HUGE: list[tuple[str, dict[str, Any]]] = [
    ("repeats", {"json": _request_with(outer__repeats=10**9)}),
    ("k", {"json": _request_with(inner__k=10**12)}),
    ("draws", {"json": _request_with(families__0__draws=10**9)}),
    ("grid", {"json": _request_with(families__0__grid={"C": [1.0] * 10_000})}),
    ("seed", {"json": _request_with(outer__seed=10**30)}),
    ("integer of 5,000 digits", {"content": '{"target": ' + "9" * 5_000 + "}"}),
    ("long target", {"json": _request_with(target="t" * 200_000)}),
    ("many families", {"json": _request_with(families=IRIS_REQUEST["families"] * 500)}),
    ("deep nesting", {"content": '{"target": ' + _nested(50) + "}"}),
    ("very deep nesting", {"content": _nested(200_000)}),
    ("10 MB body", {"content": '{"target": "' + "x" * 10_000_000 + '"}'}),
    ("NaN", {"content": json.dumps(IRIS_REQUEST).replace("0.1", "NaN")}),
    (
        "-Infinity seed",
        {
            "content": json.dumps(_request_with(outer__seed=1)).replace(
                '"seed": 1', '"seed": -Infinity'
            )
        },
    ),
]


@pytest.mark.parametrize(("case", "send"), HUGE, ids=[c[0] for c in HUGE])
def test_huge_and_non_finite_values_are_refused(
    server: Server, token: str, case: str, send: dict[str, Any]
) -> None:
    before = server.snapshot()
    headers = {"Content-Type": "application/json"} if "content" in send else {}
    with server.client(token) as client:
        answer = client.post("/v1/jobs", headers=headers, **send)
    _refused_or_empty(answer)
    assert answer.status_code in (400, 413, 422), answer.text
    _check_unchanged(server, before)


def test_huge_limits_and_offsets_are_refused(server: Server, finished_job: dict[str, Any]) -> None:
    job = finished_job["job"]
    with server.client(finished_job["token"]) as client:
        for params in ({"limit": 10**9}, {"limit": -1}, {"offset": -5}, {"offset": 10**30}):
            answer = client.get("/v1/jobs", params=params)
            _refused_or_empty(answer)
            assert answer.status_code == 422
        answer = client.get(f"/v1/jobs/{job['id']}/fold-scores", params={"limit": 10**6})
        assert answer.status_code == 422


WRONG_TYPES = [
    ("/v1/jobs", "text/plain", json.dumps(IRIS_REQUEST).encode()),
    ("/v1/jobs", "application/xml", b"<job><target>target</target></job>"),
    ("/v1/jobs", "multipart/form-data; boundary=x", b"--x\r\n\r\nhello\r\n--x--\r\n"),
    ("/v1/jobs", "application/x-www-form-urlencoded", b"target=target"),
    ("/v1/datasets", "text/csv", b"a,b\n1,2\n"),
    ("/v1/datasets/upload", "application/json", b'{"file": "a,b\\n1,2\\n"}'),
    ("/v1/schedules", "application/octet-stream", bytes(range(256))),
]


@pytest.mark.parametrize(("path", "content_type", "content"), WRONG_TYPES)
def test_wrong_content_types_are_refused(
    server: Server, token: str, path: str, content_type: str, content: bytes
) -> None:
    before = server.snapshot()
    with server.client(token) as client:
        answer = client.post(path, content=content, headers={"Content-Type": content_type})
    _refused_or_empty(answer)
    assert 400 <= answer.status_code < 500
    _check_unchanged(server, before)


def test_a_burst_of_concurrent_requests_gets_no_server_error(
    server: Server, finished_job: dict[str, Any]
) -> None:
    job = finished_job["job"]
    token = finished_job["token"]
    bad = _request_with(outer__repeats=10**6)
    mix = [
        ("GET", "/v1/jobs", None),
        ("GET", f"/v1/jobs/{job['id']}", None),
        ("GET", f"/v1/jobs/{job['id']}/fold-scores", None),
        ("GET", f"/v1/datasets/{job['dataset_hash']}/history", None),
        ("POST", "/v1/jobs", bad),
        ("GET", "/v1/jobs/' OR 1=1 --", None),
        ("GET", "/healthz", None),
        ("GET", "/readyz", None),
    ]
    before = server.snapshot()

    def send(i: int) -> int:
        method, path, body = mix[i % len(mix)]
        with server.client(token) as client:
            answer = client.request(method, path, json=body)
        _refused_or_empty(answer)
        return answer.status_code

    # 200 requests from 20 threads: SQLite's single writer and the pool must hold up
    with ThreadPoolExecutor(20) as pool:
        statuses = list(pool.map(send, range(200)))
    assert len(statuses) == 200 and max(statuses) < 500
    _check_unchanged(server, before)


@pytest.fixture(scope="module")
def pg_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Server]:
    """The same server on a fresh PostgreSQL database, where NUL characters and huge integers
    reach a stricter driver than SQLite's."""
    home: Path = tmp_path_factory.mktemp("hostile-pg") / "home"
    with server_on("postgresql", home) as live:
        yield live


NUL_BODIES: list[tuple[str, dict[str, Any]]] = [
    ("target", _request_with(target="tar\x00get")),
    ("metric", _request_with(metrics=["accu\x00racy"])),
    ("hyperparameter value", _request_with(families__0__fixed={"solver": "lb\x00fgs"})),
    ("hyperparameter name", _request_with(families__0__fixed={"sol\x00ver": "lbfgs"})),
    ("webhook", _request_with(webhook="http://127.0.0.1/\x00")),
]


def test_the_catalogue_holds_on_postgresql(pg_server: Server) -> None:
    token = pg_server.token("owners")
    with pg_server.client(token) as client:
        answer = client.post("/v1/jobs", json=copy.deepcopy(IRIS_REQUEST))
        assert answer.status_code == 202, answer.text
        job = pg_server.wait_for_job(client, answer.json()["id"])
    assert job["status"] == "succeeded", job["error"]
    test_injection_strings_in_every_id_and_query_parameter(pg_server, {"job": job, "token": token})
    before = pg_server.snapshot()
    with pg_server.client(token) as client:
        for case, body in NUL_BODIES:
            answer = client.post("/v1/jobs", json=body)
            _refused_or_empty(answer)
            assert answer.status_code == 422, (case, answer.text)
            assert "NUL" in answer.json()["detail"], case
        for case, send in HUGE:
            headers = {"Content-Type": "application/json"} if "content" in send else {}
            answer = client.post("/v1/jobs", headers=headers, **send)
            _refused_or_empty(answer)
            assert answer.status_code in (400, 413, 422), (case, answer.text)
        # PostgreSQL's text columns cannot hold NUL: an address with one is refused first
        for address in (f"/v1/jobs/{job['id'][:4]}%00x", "/v1/jobs?estimator=a%00b"):
            answer = client.get(address)
            _refused_or_empty(answer)
            assert answer.status_code == 400 and "NUL" in answer.json()["detail"], answer.text
    _check_unchanged(pg_server, before)
