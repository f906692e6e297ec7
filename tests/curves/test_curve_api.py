"""A learning curve over the REST API of a live embedded server (local pool, SQLite store)."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import pytest
from api.server import Server, running_server

from .requests import SIZES, curve


@pytest.fixture(scope="module")
def server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Server]:
    home = tmp_path_factory.mktemp("curve-home")
    with running_server(home, home.parent / "curve-server.log", FOLDWISE_LOCAL_WORKERS="2") as live:
        yield live


def test_a_curve_submitted_over_rest_finishes_with_one_point_per_size(server: Server) -> None:
    with server.client(server.token("curves")) as client:
        answer = client.post("/v1/jobs", json=curve())
        assert answer.status_code == 202, answer.text
        parent = answer.json()
        assert parent["kind"] == "learning_curve" and parent["parent_id"] is None
        done = server.wait_for_job(client, parent["id"])
        assert done["status"] == "succeeded", done
        result = done["result"]
        assert result["kind"] == "learning_curve"
        assert [p["size"] for p in result["points"]] == SIZES
        assert done["progress"]["units_done"] == done["progress"]["units_total"] > 0
        for job_id in result["jobs"]:
            child = client.get(f"/v1/jobs/{job_id}").json()
            assert (child["kind"], child["parent_id"]) == ("selection", parent["id"])
            assert child["status"] == "succeeded" and child["result"]["outer"]
        listed = client.get("/v1/jobs").json()
        assert listed["count"] == 1 + len(SIZES)


def test_cancelling_a_curve_cancels_its_sizes(server: Server) -> None:
    with server.client(server.token("curves-cancel")) as client:
        # other outer folds than the test above, so the store cannot answer it at once
        outer = {"method": "stratified_kfold", "k": 3, "seed": 3}
        parent = client.post("/v1/jobs", json=curve(sizes=[0.5, 1.0], outer=outer)).json()
        cancelled = client.post(f"/v1/jobs/{parent['id']}/cancel").json()
        assert cancelled["status"] == "cancelled"
        jobs = client.get("/v1/jobs").json()["data"]
        children = [j for j in jobs if j["parent_id"] == parent["id"]]
        assert len(children) == 2
        # a size may have finished in the moment before the cancel; none is left running
        assert {j["status"] for j in children} <= {"cancelled", "succeeded"}


@pytest.mark.parametrize(
    ("sizes", "says"),
    [
        ([], "non-empty list"),
        ([0.5, 1.5], "fraction in (0, 1]"),
        ([0.0, 1.0], "fraction in (0, 1]"),
        ([0.5, 0.5], "listed twice"),
        ([round(0.1 * i, 2) for i in range(1, 12)], "at most 10"),
        (["half"], "fraction in (0, 1]"),
        ([0.001, 1.0], "at size 0.001"),  # one row per class cannot be split 3 ways
    ],
)
def test_bad_sizes_are_refused_naming_sizes_and_store_nothing(
    server: Server, sizes: list[Any], says: str
) -> None:
    before = server.snapshot()
    with server.client(server.token("curves-bad")) as client:
        answer = client.post("/v1/jobs", json=curve(sizes=sizes))
    assert answer.status_code == 422, answer.text
    assert answer.headers["content-type"].startswith("application/problem+json")
    problem = answer.json()
    assert problem["field"] == "sizes", problem
    assert says in problem["detail"], problem
    assert server.snapshot() == before


def test_a_missing_sizes_or_an_unknown_kind_is_refused(server: Server) -> None:
    body = curve()
    del body["sizes"]
    with server.client(server.token("curves-bad")) as client:
        missing = client.post("/v1/jobs", json=body).json()
        unknown = client.post("/v1/jobs", json=curve(kind="bootstrap")).json()
        explicit = client.post("/v1/jobs", json=curve(kind="selection"))
    assert missing["field"] == "sizes"
    assert unknown["field"] == "kind"
    # an explicit selection kind is an ordinary request, where sizes are not a field
    assert explicit.json()["field"] == "sizes"
