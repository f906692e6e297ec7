"""Probes, Prometheus metrics, the OpenAPI document, and problems for unknown routes."""

from __future__ import annotations

import re
import socket
import time
from typing import Any
from urllib.parse import urlsplit

import pytest

from .server import Server

# every route of API v1 and the probes, as (method, path)
ROUTES = {
    ("get", "/healthz"),
    ("get", "/readyz"),
    ("get", "/metrics"),
    ("post", "/v1/datasets"),
    ("get", "/v1/datasets"),
    ("post", "/v1/datasets/upload"),
    ("get", "/v1/datasets/{content_hash}"),
    ("post", "/v1/jobs"),
    ("get", "/v1/jobs"),
    ("get", "/v1/jobs/{job_id}"),
    ("post", "/v1/jobs/{job_id}/cancel"),
    ("post", "/v1/jobs/{job_id}/audit"),
    ("get", "/v1/audits/{audit_id}"),
    ("get", "/v1/jobs/{job_id}/provenance"),
    ("get", "/v1/jobs/{job_id}/fold-scores"),
    ("get", "/v1/jobs/{job_id}/fold-scores.csv"),
    ("post", "/v1/schedules"),
    ("get", "/v1/schedules"),
    ("get", "/v1/schedules/{schedule_id}"),
    ("get", "/v1/schedules/{schedule_id}/refreshes"),
    ("post", "/v1/schedules/{schedule_id}/refresh"),
    ("get", "/v1/jobs/{job_id}/fold-scores.parquet"),
    ("get", "/v1/datasets/{content_hash}/jobs"),
    ("get", "/v1/datasets/{content_hash}/fold-scores"),
    ("get", "/v1/datasets/{content_hash}/fold-scores.csv"),
    ("get", "/v1/datasets/{content_hash}/fold-scores.parquet"),
    ("get", "/v1/datasets/{content_hash}/history"),
    ("get", "/v1/compare"),
    ("get", "/v1/jobs/{job_id}/model"),
    ("get", "/v1/jobs/{job_id}/model-card"),
    ("get", "/v1/jobs/{job_id}/model-card.md"),
    ("get", "/v1/jobs/{job_id}/predictions"),
    ("get", "/v1/jobs/{job_id}/predictions.csv"),
    ("get", "/v1/jobs/{job_id}/predictions.parquet"),
}


def test_healthz_and_readyz(server: Server) -> None:
    with server.client() as client:
        alive = client.get("/healthz")
        ready = client.get("/readyz")
    assert alive.status_code == 200 and alive.json()["status"] == "ok"
    assert ready.status_code == 200 and ready.json()["checks"] == {"database": "ok"}


def _ask_healthz(connection: socket.socket) -> bytes:
    connection.sendall(b"GET /healthz HTTP/1.1\r\nHost: foldwise\r\n\r\n")
    answer = b""
    while b"\r\n\r\n" not in answer or not answer.endswith(b"}"):
        chunk = connection.recv(4096)
        if not chunk:
            break
        answer += chunk
    return answer


def test_an_idle_keep_alive_connection_outlasts_the_clients_own_idle_timeout(
    server: Server,
) -> None:
    # httpx keeps an idle connection 5 s (its documented keepalive_expiry default); a server
    # closing at the same moment races the client's next request, which then fails with a reset
    # (seen in the readers test). The server must still hold the connection after 6 s idle.
    address = urlsplit(server.base_url)
    with socket.create_connection((address.hostname, address.port), timeout=10) as connection:
        assert _ask_healthz(connection).startswith(b"HTTP/1.1 200")
        time.sleep(6.0)
        assert _ask_healthz(connection).startswith(b"HTTP/1.1 200")


def test_metrics_in_prometheus_text_format(server: Server, finished_job: dict[str, Any]) -> None:
    with server.client() as client:
        answer = client.get("/metrics")
    assert answer.status_code == 200
    assert answer.headers["content-type"].startswith("text/plain; version=0.0.4")
    text = answer.text
    for name, kind in [
        ("foldwise_jobs", "gauge"),
        ("foldwise_units_done_total", "counter"),
        ("foldwise_unit_seconds", "histogram"),
        ("foldwise_queue_depth", "gauge"),
    ]:
        assert f"# TYPE {name} {kind}\n" in text
    samples = dict(re.findall(r"^(\S+) (\S+)$", text, flags=re.MULTILINE))
    assert int(samples['foldwise_jobs{status="succeeded"}']) >= 1
    done = int(samples["foldwise_units_done_total"])
    assert done >= finished_job["job"]["progress"]["units_done"]
    assert int(samples['foldwise_unit_seconds_bucket{le="+Inf"}']) == done
    assert int(samples["foldwise_unit_seconds_count"]) == done
    buckets = [int(v) for k, v in samples.items() if k.startswith("foldwise_unit_seconds_bucket")]
    assert buckets == sorted(buckets)  # cumulative
    assert int(samples["foldwise_queue_depth"]) >= 0


@pytest.fixture(scope="module")
def document(server: Server) -> dict[str, Any]:
    with server.client() as client:
        answer = client.get("/openapi.json")
    assert answer.status_code == 200
    doc: dict[str, Any] = answer.json()
    return doc


def test_openapi_lists_every_route(document: dict[str, Any]) -> None:
    listed = {(m, p) for p, ops in document["paths"].items() for m in ops}
    # the problem-type pages have a test of their own (test_problem_types.py)
    assert {(m, p) for m, p in listed if not p.startswith("/problems/")} == ROUTES


@pytest.mark.parametrize(("method", "path"), sorted(ROUTES))
def test_each_route_documents_its_answer_and_its_problems(
    document: dict[str, Any], method: str, path: str
) -> None:
    operation = document["paths"][path][method]
    assert operation["summary"] and operation["tags"]
    answers = operation["responses"]
    success = [s for s in answers if s.startswith("2")]
    assert success
    for status in success:
        content = answers[status]["content"]
        if "application/json" in content:
            assert "$ref" in content["application/json"]["schema"]
        else:
            assert set(content) & {
                "text/plain",
                "text/csv",
                "text/markdown",
                "application/vnd.apache.parquet",
                "application/vnd.skops",
            }
    problems = [s for s in answers if s[0] in "45"]
    if path.startswith("/v1/"):
        assert {"401", "403", "422"} <= set(problems)
        assert operation["security"] == [{"HTTPBearer": []}]
    for status in problems:
        schema = answers[status]["content"]["application/problem+json"]["schema"]
        assert schema["$ref"] == "#/components/schemas/Problem"


def test_openapi_describes_job_request_v1_and_the_upload(document: dict[str, Any]) -> None:
    schemas = document["components"]["schemas"]
    body = document["paths"]["/v1/jobs"]["post"]["requestBody"]["content"]["application/json"]
    assert body["schema"] == {"$ref": "#/components/schemas/JobRequest"}
    request = schemas["JobRequest"]
    assert {"dataset", "target", "families", "outer", "inner", "metrics"} <= set(
        request["properties"]
    )
    # every reference resolves inside the document, so a client generator can follow it
    refs = re.findall(r'"\$ref": "#/components/schemas/([^"]+)"', str(document).replace("'", '"'))
    assert refs and set(refs) <= set(schemas)
    upload = document["paths"]["/v1/datasets/upload"]["post"]["requestBody"]["content"]
    assert upload["multipart/form-data"]["schema"]["properties"]["file"]["format"] == "binary"
    assert "Idempotency-Key" in [
        p["name"] for p in document["paths"]["/v1/jobs"]["post"]["parameters"]
    ]


def test_unknown_routes_and_methods_are_problems(server: Server) -> None:
    with server.client() as client:
        missing = client.get("/v1/nothing-here")
        wrong_method = client.delete("/healthz")
    assert missing.status_code == 404 and wrong_method.status_code == 405
    for answer in (missing, wrong_method):
        assert answer.headers["content-type"] == "application/problem+json"
        assert answer.json()["status"] == answer.status_code
