"""Bounds on everything a request can make the server do, over HTTP (the issue's reproducers).

Each refusal is a 422 problem naming the field, arrives long before any fold is built, and
leaves nothing stored: a million outer repeats, a job past the fits cap (the sentence states
the number and the cap), a learning curve whose sizes together pass it, NaN and Infinity in a
JSON body (before anything is hashed), offsets past a SQL BIGINT on every list route.
"""

from __future__ import annotations

import copy
import json
import time
from typing import Any

import pytest

from service.config import load_settings
from service.cv.size import job_fits

from .server import IRIS_REQUEST, Server

MAX_SQL_INT = 2**63 - 1  # PostgreSQL's BIGINT and SQLite's INTEGER hold no more


def _timed_post(client: Any, body: dict[str, Any]) -> tuple[Any, float]:
    """The answer and the median seconds of three identical posts, after one warm-up post.

    The warm-up keeps a fresh server's first-request costs (connections, lazy imports) out of
    the figure: what is measured is the cost of refusing the request.
    """
    client.post("/v1/jobs", json=body)
    times, answer = [], None
    for _ in range(3):
        started = time.monotonic()
        answer = client.post("/v1/jobs", json=body)
        times.append(time.monotonic() - started)
    print(f"refused in {sorted(times)[1]:.3f} s (median of {[round(t, 3) for t in times]})")
    return answer, sorted(times)[1]


def _problem(answer: Any, status: int = 422) -> dict[str, Any]:
    assert answer.status_code == status, answer.text
    assert answer.headers["content-type"] == "application/problem+json"
    problem: dict[str, Any] = answer.json()
    assert problem["detail"].endswith(".") and "Traceback" not in problem["detail"]
    return problem


def test_a_million_outer_repeats_is_refused_in_well_under_a_second(
    server: Server, token: str
) -> None:
    request = copy.deepcopy(IRIS_REQUEST)
    request["outer"]["repeats"] = 1_000_000
    before = server.snapshot()
    with server.client(token) as client:
        answer, elapsed = _timed_post(client, request)
    problem = _problem(answer)
    assert problem["field"] == "outer.repeats"
    assert elapsed < 1.0, f"{elapsed:.2f} s"
    assert server.snapshot() == before


def test_a_job_past_the_fits_cap_states_the_number_and_the_cap(server: Server, token: str) -> None:
    request = copy.deepcopy(IRIS_REQUEST)
    request["outer"].update(k=10, repeats=100)
    request["inner"]["k"] = 10
    request["families"][0]["grid"]["C"] = [0.01 * (i + 1) for i in range(20)]
    # 1,000 outer folds x (10 inner folds x 20 candidates + 1) + (10 x 20 + 1)
    needed = 1_000 * (10 * 20 + 1) + (10 * 20 + 1)
    cap = load_settings(server.env).max_job_fits
    before = server.snapshot()
    with server.client(token) as client:
        answer, elapsed = _timed_post(client, request)
    problem = _problem(answer)
    assert problem["field"] == "outer.repeats"
    assert problem["detail"] == (
        f"this request needs {needed:,} fits; a job may have at most {cap:,}; "
        "reduce outer.repeats or the search space."
    )
    assert elapsed < 1.0, f"{elapsed:.2f} s"
    assert server.snapshot() == before


def test_the_fits_count_is_the_work_a_job_really_does(finished_job: dict[str, Any]) -> None:
    # the count the cap is checked against equals the fits the server reported doing
    result = finished_job["job"]["result"]
    spec_fits = job_fits(
        _spec(IRIS_REQUEST), candidates=len(IRIS_REQUEST["families"][0]["grid"]["C"])
    )
    assert result["work"]["fits"] == spec_fits == 3 * (3 * 2 + 1) + (3 * 2 + 1)


def _spec(request: dict[str, Any]) -> Any:
    from service.jobs.intake.request import parse_job_request

    return parse_job_request(copy.deepcopy(request))


def test_a_learning_curve_counts_the_fits_of_every_size(server: Server, token: str) -> None:
    request = copy.deepcopy(IRIS_REQUEST)
    request["outer"].update(k=10, repeats=20)
    request["inner"]["k"] = 10
    request["families"][0]["grid"]["C"] = [0.01 * (i + 1) for i in range(20)]
    one_size = 200 * (10 * 20 + 1) + (10 * 20 + 1)  # 40,401: a selection the cap admits
    curve = {**request, "kind": "learning_curve", "sizes": [0.2, 0.4, 0.6, 0.8, 1.0]}
    before = server.snapshot()
    with server.client(token) as client:
        answer = client.post("/v1/jobs", json=curve)
    problem = _problem(answer)
    assert f"needs {5 * one_size:,} fits (5 sizes of a learning curve)" in problem["detail"]
    assert server.snapshot() == before


NON_FINITE = [
    ('"C": [NaN, 1.0]', "families[0].grid.C[0]", "NaN"),
    ('"C": [0.1, Infinity]', "families[0].grid.C[1]", "Infinity"),
    ('"C": [-Infinity]', "families[0].grid.C[0]", "-Infinity"),
    ('"C": [1e400]', "families[0].grid.C[0]", "Infinity"),
]


@pytest.mark.parametrize(
    ("grid", "field", "shown"), NON_FINITE, ids=[c[2] + c[0][-6:] for c in NON_FINITE]
)
def test_non_finite_numbers_are_a_422_naming_the_place(
    server: Server, token: str, grid: str, field: str, shown: str
) -> None:
    body = json.dumps(IRIS_REQUEST).replace('"C": [0.1, 1.0]', grid)
    assert grid in body
    before = server.snapshot()
    with server.client(token) as client:
        # the same Idempotency-Key twice: the second call must not find a half-made job
        for _ in range(2):
            answer = client.post(
                "/v1/jobs",
                content=body,
                headers={"Content-Type": "application/json", "Idempotency-Key": f"nf-{field}"},
            )
            problem = _problem(answer)
            assert problem["field"] == field
            assert problem["detail"].startswith(f"is {shown},")
    assert server.snapshot() == before


@pytest.mark.parametrize(
    ("path", "body"),
    [
        ("/v1/datasets", '{"sample": "iris", "note": NaN}'),
        ("/v1/schedules", '{"source": {"sample": "iris"}, "threshold": Infinity}'),
        ("/v1/jobs/nothing/audit", '{"fraction": NaN}'),
    ],
)
def test_non_finite_numbers_are_refused_on_every_json_route(
    server: Server, token: str, path: str, body: str
) -> None:
    before = server.snapshot()
    with server.client(token) as client:
        answer = client.post(path, content=body, headers={"Content-Type": "application/json"})
    assert _problem(answer)["detail"].endswith("give a finite number.")
    assert server.snapshot() == before


LIST_ROUTES = [
    ("/v1/jobs", "offset"),
    ("/v1/datasets", "offset"),
    ("/v1/schedules", "offset"),
    ("/v1/jobs/{job}/fold-scores", "after"),
    ("/v1/datasets/{dataset}/jobs", "offset"),
    ("/v1/datasets/{dataset}/fold-scores", "after"),
]


@pytest.mark.parametrize(("route", "name"), LIST_ROUTES, ids=[r[0] for r in LIST_ROUTES])
def test_offsets_past_a_bigint_are_a_422_on_every_list_route(
    server: Server, finished_job: dict[str, Any], route: str, name: str
) -> None:
    job = finished_job["job"]
    path = route.format(job=job["id"], dataset=job["dataset_hash"])
    with server.client(finished_job["token"]) as client:
        past = client.get(path, params={name: MAX_SQL_INT + 1})
        huge = client.get(path, params={name: 10**40})
        last = client.get(path, params={name: MAX_SQL_INT})
    for answer in (past, huge):
        assert _problem(answer)["field"] == name
    # the largest value the store can hold is a valid (empty) page
    assert last.status_code == 200, last.text
    assert last.json()["data"] == []


def test_a_wrong_method_is_a_405_listing_every_method_of_the_path(
    server: Server, token: str
) -> None:
    with server.client(token) as client:
        upload = client.get("/v1/datasets/upload")
        jobs = client.delete("/v1/jobs")
        one_job = client.post("/v1/jobs/abc")
    assert _problem(upload, 405)["detail"] == "GET is not a method of this path; use POST."
    assert upload.headers["allow"] == "POST"
    assert jobs.status_code == 405 and jobs.headers["allow"] == "GET, POST"
    assert one_job.status_code == 405 and one_job.headers["allow"] == "GET"
