"""Schedules end to end against a live `foldwise serve` (embedded: SQLite and the local pool).

Refresh once (a job), again on the same file (unchanged: no job, no fits), again after the file
was rewritten (a new job and the comparison); every refresh notifies a receiver started here,
with a signature the test recomputes from the published algorithm.
"""

from __future__ import annotations

import copy
import hashlib
import hmac
import json
import subprocess
import sys
import time
from collections.abc import Iterator
from typing import Any

import httpx
import pytest
from api.server import REPO, Server, running_server
from sqlalchemy import func, select

from service.store.models import WorkUnit

from .receiver import Receiver, receiving
from .tables import TEMPLATE, write_table

SECRET_KEY = "test-only-secret-key"
TEAM = "pumps"


@pytest.fixture(scope="module")
def receiver() -> Iterator[Receiver]:
    with receiving() as running:
        yield running


@pytest.fixture(scope="module")
def live(tmp_path_factory: pytest.TempPathFactory, receiver: Receiver) -> Iterator[Server]:
    home = tmp_path_factory.mktemp("home")
    root = tmp_path_factory.mktemp("data")
    write_table(root / "pumps.csv", seed=1)
    with running_server(
        home,
        home / "server.log",
        FOLDWISE_DATA_ROOTS=str(root),
        FOLDWISE_WEBHOOK_ALLOW=receiver.url + "hooks/",
        FOLDWISE_SECRET_KEY=SECRET_KEY,
    ) as server:
        server.root = root  # type: ignore[attr-defined]
        yield server


@pytest.fixture(scope="module")
def client(live: Server) -> Iterator[httpx.Client]:
    with live.client(live.token(TEAM)) as http:
        yield http


def _fits(server: Server) -> int:
    with server.sessions() as session:
        return int(session.scalar(select(func.coalesce(func.sum(WorkUnit.fits), 0))) or 0)


def _wait_refresh(client: httpx.Client, schedule_id: str, refresh_id: int) -> dict[str, Any]:
    deadline = time.monotonic() + 180
    while True:
        listed = client.get(f"/v1/schedules/{schedule_id}/refreshes").json()["data"]
        found = next(r for r in listed if r["id"] == refresh_id)
        if found["status"] not in ("pending", "running"):
            return found
        assert time.monotonic() < deadline, f"refresh {refresh_id} still {found['status']}"
        time.sleep(0.3)


def _verify(received: Any) -> dict[str, Any]:
    # RFC 2104 HMAC with SHA-256 (hashlib/hmac from the standard library): the team's secret is
    # HMAC-SHA256(FOLDWISE_SECRET_KEY, team) in hex, and the header signs the exact body bytes
    secret = hmac.new(SECRET_KEY.encode(), TEAM.encode(), hashlib.sha256).hexdigest()
    expected = "sha256=" + hmac.new(secret.encode(), received.body, hashlib.sha256).hexdigest()
    assert hmac.compare_digest(received.headers["X-Foldwise-Signature"], expected)
    body: dict[str, Any] = json.loads(received.body)
    return body


def test_refresh_runs_then_records_unchanged_then_compares(
    live: Server, client: httpx.Client, receiver: Receiver
) -> None:
    created = client.post(
        "/v1/schedules",
        json={
            "source": {"path": "pumps.csv"},
            "template": TEMPLATE,
            "cron": "0 3 1 1 *",
            "timezone": "Europe/Berlin",
            "threshold": 0.2,
            "webhook": receiver.url + "hooks/pumps",
        },
    )
    assert created.status_code == 201, created.text
    schedule = created.json()
    # hand-computed: 03:00 on 1 January in Berlin is 02:00 UTC (CET, +01:00)
    assert schedule["next_due_at"].startswith("2027-01-01T02:00:00")
    sid = schedule["id"]

    first = client.post(f"/v1/schedules/{sid}/refresh")
    assert first.status_code == 202, first.text
    assert first.json()["status"] == "running" and first.json()["job_id"]
    done = _wait_refresh(client, sid, first.json()["id"])
    assert done["status"] == "reselected", done
    assert done["comparison"]["previous"] is None
    jobs, fits = live.count_jobs(), _fits(live)
    assert fits > 0

    second = client.post(f"/v1/schedules/{sid}/refresh").json()
    assert second["status"] == "unchanged"
    assert second["job_id"] is None and second["previous_job_id"] == done["job_id"]
    assert second["dataset_hash"] == done["dataset_hash"]
    assert (live.count_jobs(), _fits(live)) == (jobs, fits)  # nothing recomputed

    write_table(live.root / "pumps.csv", seed=2)  # type: ignore[attr-defined]
    third = client.post(f"/v1/schedules/{sid}/refresh").json()
    assert third["status"] == "running" and third["dataset_hash"] != done["dataset_hash"]
    ended = _wait_refresh(client, sid, third["id"])
    assert live.count_jobs() == jobs + 1
    comparison = ended["comparison"]
    assert ended["previous_job_id"] == done["job_id"]
    # same labels, same seeds: the same outer folds, so the paired corrected test applies
    assert comparison["test"] == "nadeau_bengio_corrected_t"
    assert 0.0 <= comparison["p_value"] <= 1.0 and comparison["df"] == 2  # J - 1 = 3 - 1
    expected = "pick_changed" if comparison["pick_changed"] else "reselected"
    assert ended["status"] == ("degraded" if comparison["mean"] < 0.2 else expected)

    listed = client.get(f"/v1/schedules/{sid}/refreshes").json()
    assert listed["count"] == 3
    assert [r["id"] for r in listed["data"]] == [third["id"], second["id"], first.json()["id"]]

    bodies = [_verify(r) for r in receiver.wait_for(3)]
    notices = {b["refresh_id"]: b for b in bodies if b["event"] == "refresh.finished"}
    assert notices[second["id"]]["status"] == "unchanged"
    assert notices[third["id"]]["comparison"]["p_value"] == comparison["p_value"]
    assert all(r.path == "/hooks/pumps" for r in receiver.got)


def test_webhook_secret_command_prints_the_secret_receivers_use(live: Server) -> None:
    printed = subprocess.run(
        [sys.executable, "-m", "service.cli.main", "webhook-secret", "--team", TEAM],
        env=live.env,
        cwd=REPO,
        capture_output=True,
        text=True,
        check=True,
    ).stdout
    # RFC 2104 HMAC-SHA256 of the team name under the server's key
    assert (
        printed == hmac.new(SECRET_KEY.encode(), TEAM.encode(), hashlib.sha256).hexdigest() + "\n"
    )


def test_job_webhook_is_signed_and_sent_when_the_job_ends(
    live: Server, client: httpx.Client, receiver: Receiver
) -> None:
    before = len(receiver.got)
    body = {**copy.deepcopy(TEMPLATE), "dataset": {"path": "pumps.csv"}}
    body["webhook"] = receiver.url + "hooks/jobs"
    answer = client.post("/v1/jobs", json=body)
    assert answer.status_code == 202, answer.text
    job = live.wait_for_job(client, answer.json()["id"])
    notice = _verify(receiver.wait_for(before + 1)[-1])
    assert notice["event"] == "job.finished" and notice["job_id"] == job["id"]
    assert notice["status"] == "succeeded"
    assert notice["estimate"]["mean"] == job["result"]["estimate"]["accuracy"]["mean"]


@pytest.mark.parametrize(
    ("change", "field", "words"),
    [
        ({"webhook": "http://127.0.0.1:9/elsewhere"}, "webhook", "not under a webhook prefix"),
        ({"cron": "0 3 * *"}, "cron", "five fields"),
        ({"timezone": "Europe/Atlantis"}, "timezone", "IANA"),
        ({"source": {"path": "missing.csv"}}, "source.path", ""),
        ({"source": {"sample": "iris"}}, "source", "never changes"),
        ({"template": {**TEMPLATE, "target": "nope"}}, "template.target", "nope"),
        ({"template": {**TEMPLATE, "dataset": "abc"}}, "template.dataset", "no dataset"),
        ({"degraded_on": "lower"}, "degraded_on", "'interval'"),
        ({"degraded_on": "interval"}, "degraded_on", "give a threshold"),
    ],
)
def test_bad_schedules_are_refused_and_nothing_is_stored(
    live: Server,
    client: httpx.Client,
    receiver: Receiver,
    change: dict[str, Any],
    field: str,
    words: str,
) -> None:
    body = {"source": {"path": "pumps.csv"}, "template": TEMPLATE, "cron": "0 3 * * *", **change}
    before = client.get("/v1/schedules").json()["count"]
    answer = client.post("/v1/schedules", json=body)
    assert answer.status_code == 422, answer.text
    assert answer.headers["content-type"].startswith("application/problem+json")
    problem = answer.json()
    assert problem["field"] == field and words in problem["detail"]
    assert client.get("/v1/schedules").json()["count"] == before


def test_job_webhook_outside_the_allow_list_is_refused(live: Server, client: httpx.Client) -> None:
    jobs = live.count_jobs()
    body = {**copy.deepcopy(TEMPLATE), "dataset": {"path": "pumps.csv"}}
    for url in ("http://127.0.0.1:9/hooks/", "http://127.0.0.1:9@example.invalid/hooks/"):
        answer = client.post("/v1/jobs", json={**body, "webhook": url})
        assert answer.status_code == 422
        assert answer.json()["field"] == "webhook"
    assert live.count_jobs() == jobs


def test_another_teams_schedule_is_not_found(live: Server, client: httpx.Client) -> None:
    sid = client.get("/v1/schedules").json()["data"][0]["id"]
    with live.client(live.token("other-team")) as other:
        assert other.get(f"/v1/schedules/{sid}").status_code == 404
        assert other.post(f"/v1/schedules/{sid}/refresh").status_code == 404


def test_webhook_secret_without_a_key_exits_2_with_one_sentence(live: Server) -> None:
    env = {k: v for k, v in live.env.items() if k != "FOLDWISE_SECRET_KEY"}
    done = subprocess.run(
        [sys.executable, "-m", "service.cli.main", "webhook-secret", "--team", TEAM],
        env=env,
        cwd=REPO,
        capture_output=True,
        text=True,
    )
    assert done.returncode == 2 and done.stdout == ""
    assert done.stderr.startswith("error: FOLDWISE_SECRET_KEY: is not set")
    assert done.stderr.count("\n") == 1 and "Traceback" not in done.stderr


def test_degraded_on_is_stored_and_shown(live: Server, client: httpx.Client) -> None:
    body = {"source": {"path": "pumps.csv"}, "template": TEMPLATE, "cron": "0 3 * * *"}
    plain = client.post("/v1/schedules", json=body)
    assert plain.status_code == 201 and plain.json()["degraded_on"] == "estimate"
    created = client.post(
        "/v1/schedules", json={**body, "threshold": 0.6, "degraded_on": "interval"}
    )
    assert created.status_code == 201, created.text
    shown = client.get(f"/v1/schedules/{created.json()['id']}").json()
    assert (shown["degraded_on"], shown["threshold"]) == ("interval", 0.6)
