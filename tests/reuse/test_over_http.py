"""Reuse, audit and provenance through a live `foldwise serve` (local pool, SQLite store)."""

from __future__ import annotations

import time
from collections.abc import Iterator
from typing import Any

import httpx
import pytest
from api.server import Server, running_server
from sqlalchemy import func, select

from service.store.followup_models import Audit
from service.store.models import FoldScore, JobCandidate, JobFold, WorkUnit

from .conftest import make_request

AUDIT_TIMEOUT = 120.0


@pytest.fixture(scope="module")
def live(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Server]:
    """One embedded server for this module, two local worker processes."""
    home = tmp_path_factory.mktemp("reuse-home")
    with running_server(home, home.parent / "reuse-server.log", FOLDWISE_LOCAL_WORKERS="2") as s:
        yield s


def _submit(client: httpx.Client, live: Server, request: dict[str, Any]) -> dict[str, Any]:
    answer = client.post("/v1/jobs", json=request)
    assert answer.status_code == 202, answer.text
    job = live.wait_for_job(client, answer.json()["id"])
    assert job["status"] == "succeeded", job["error"]
    return job


def _wait_for_audit(client: httpx.Client, location: str) -> dict[str, Any]:
    deadline = time.monotonic() + AUDIT_TIMEOUT
    while True:
        audit: dict[str, Any] = client.get(location).json()
        if audit["status"] in ("done", "failed"):
            return audit
        assert time.monotonic() < deadline, f"audit still {audit['status']}"
        time.sleep(0.3)


def test_resubmission_audit_and_provenance_over_http(live: Server) -> None:
    token = live.token("reusers")
    with live.client(token) as client:
        first = _submit(client, live, make_request())
        second = _submit(client, live, make_request())
        # the second job's units all came from the store: it finished with no unit to run
        assert second["result"]["work"]["fits"] == 0
        assert second["result"]["work"]["units_reused"] == second["result"]["work"]["units_total"]
        for part in ("outer", "estimate", "final_pick"):
            assert second["result"][part] == first["result"][part]

        trail = client.get(f"/v1/jobs/{second['id']}/provenance")
        assert trail.status_code == 200, trail.text
        body = trail.json()
        with live.sessions() as session:
            units = session.scalar(select(func.count()).where(WorkUnit.job_id == second["id"]))
            folds = session.scalar(select(func.count()).where(JobFold.job_id == second["id"]))
            keys = select(JobCandidate.candidate_key).where(JobCandidate.job_id == second["id"])
            prints = select(JobFold.fingerprint).where(JobFold.job_id == second["id"])
            scores = session.scalar(
                select(func.count()).where(
                    FoldScore.fold_fingerprint.in_(prints), FoldScore.candidate_key.in_(keys)
                )
            )
        assert len(body["units"]) == units
        assert len(body["folds"]) == folds
        assert {u["source_job_id"] for u in body["units"]} == {first["id"]}
        assert all(u["reused"] and u["fits"] == 0 for u in body["units"])
        # every score the second job uses was computed by the first one
        assert sum(g["scores"] for g in body["fold_scores"]) == scores
        assert {g["job_id"] for g in body["fold_scores"]} == {first["id"]}
        assert body["final_model"]["sha256"] == first["result"]["final_pick"]["model_sha256"]
        assert body["dataset"]["registered_by"] == ["reusers"]

        started = client.post(f"/v1/jobs/{first['id']}/audit", json={"fraction": 1.0})
        assert started.status_code == 202, started.text
        audit = _wait_for_audit(client, started.headers["Location"])
        assert audit["status"] == "done", audit["report"]
        report = audit["report"]
        assert report["differing"] == 0 and report["identical"] == report["scores_checked"] > 0
        listed = client.get(f"/v1/jobs/{first['id']}/provenance").json()["audits"]
        assert [a["id"] for a in listed] == [audit["id"]]

        # bad input: one sentence naming the field, and no audit stored
        with live.sessions() as session:
            before = session.scalar(select(func.count()).select_from(Audit))
        refused = client.post(f"/v1/jobs/{first['id']}/audit", json={"fraction": 1.5})
        assert refused.status_code == 422
        assert refused.headers["content-type"].startswith("application/problem+json")
        assert refused.json()["field"] == "fraction"
        with live.sessions() as session:
            assert session.scalar(select(func.count()).select_from(Audit)) == before

    other = live.token("strangers")
    with live.client(other) as client:
        assert client.get(started.headers["Location"]).status_code == 404
        assert client.get(f"/v1/jobs/{first['id']}/provenance").status_code == 404
