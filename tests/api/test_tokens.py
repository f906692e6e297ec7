"""`foldwise token create --expires-in / list / revoke` against a live server, on both stores:
revoked and expired tokens get 401, and a report-page session signed in with one ends too."""

from __future__ import annotations

import json
import subprocess
import sys
import time
import uuid
from collections.abc import Iterator
from datetime import datetime
from typing import Any

import httpx
import pytest
from cli.runner import run_foldwise_in_process

from service.auth import hash_token
from service.store.models import ApiToken

from .server import REPO, Server
from .stores import STORES, server_on


@pytest.fixture(scope="module", params=STORES)
def live(
    request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory
) -> Iterator[Server]:
    """A server on each store."""
    with server_on(request.param, tmp_path_factory.mktemp(f"tokens-{request.param}")) as server:
        yield server


def _script(server: Server, *args: str) -> subprocess.CompletedProcess[str]:
    """`foldwise token ARGS` as the real console script, in a process of its own."""
    return subprocess.run(
        [sys.executable, "-m", "service.cli.main", "token", *args],
        env=server.env,
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=120,
    )


def _cli(server: Server, *args: str) -> subprocess.CompletedProcess[str]:
    """`foldwise token ARGS` run in this process against the server's store (a process per call
    costs seconds of imports; `_script` runs the console script for the end-to-end cases)."""
    env = {k: v for k, v in server.env.items() if k.startswith("FOLDWISE_")}
    out = run_foldwise_in_process("token", *args, cwd=REPO, env=env)
    return subprocess.CompletedProcess(
        ["foldwise", "token", *args], out.code, out.stdout, out.stderr
    )


def _create(server: Server, team: str, *extra: str) -> str:
    made = _cli(server, "create", "--team", team, "--scopes", "submit,read", *extra)
    assert made.returncode == 0, made.stderr
    return made.stdout.strip()


def _listed(server: Server, team: str) -> list[dict[str, Any]]:
    shown = _cli(server, "list", "--team", team, "--json")
    assert shown.returncode == 0, shown.stderr
    rows: list[dict[str, Any]] = json.loads(shown.stdout)
    return rows


def _signed_in(server: Server, token: str) -> httpx.Client:
    """A browser-like client holding a report session (a POST with no Origin: not a page)."""
    client = httpx.Client(base_url=server.base_url, timeout=60)
    answer = client.post("/reports/sign-in", data={"token": token, "next": "/reports/"})
    assert answer.status_code == 303 and "foldwise_session" in client.cookies
    return client


def _reads_reports(client: httpx.Client) -> bool:
    answer = client.get("/reports/", follow_redirects=False)
    assert answer.status_code in (200, 303), answer.text
    return answer.status_code == 200


def test_list_shows_everything_but_the_token(live: Server) -> None:
    team = f"t-{uuid.uuid4().hex[:6]}"
    token = _create(live, team, "--expires-in", "30")
    other = _create(live, f"u-{uuid.uuid4().hex[:6]}")
    analyst = _cli(live, "create", "--team", team, "--scopes", "read", "--analyst").stdout.strip()
    rows = _listed(live, team)
    assert [r["team"] for r in rows] == [team, team]
    first, second = rows
    assert first["prefix"] == token[:11] and first["scopes"] == ["submit", "read"]
    assert not first["analyst"] and second["analyst"] and second["prefix"] == analyst[:11]
    assert first["revoked_at"] is None and first["live"]
    created = datetime.fromisoformat(first["created_at"])
    expires = datetime.fromisoformat(first["expires_at"])
    assert abs((expires - created).total_seconds() - 30 * 86400) < 60
    assert second["expires_at"] is None
    human = _cli(live, "list")
    whole = _cli(live, "list", "--json")
    for text in (human.stdout, whole.stdout, json.dumps(rows)):
        for secret in (token, other, analyst):
            assert secret not in text and secret[11:20] not in text
    assert team in human.stdout and str(first["id"]) in human.stdout


def test_revoked_tokens_get_401_and_their_report_session_ends(live: Server) -> None:
    team = f"t-{uuid.uuid4().hex[:6]}"
    by_id, by_prefix = _create(live, team), _create(live, team)
    ids = {r["prefix"]: r["id"] for r in _listed(live, team)}
    sessions = [_signed_in(live, t) for t in (by_id, by_prefix)]
    assert all(_reads_reports(s) for s in sessions)
    with live.client(by_id) as api:
        assert api.get("/v1/jobs").status_code == 200

    assert _cli(live, "revoke", str(ids[by_id[:11]])).returncode == 0
    revoked = _cli(live, "revoke", by_prefix[:9])  # a start of the shown prefix is enough
    assert revoked.returncode == 0 and "revoked" in revoked.stderr
    again = _cli(live, "revoke", by_prefix[:11])
    assert again.returncode == 0 and "already" in again.stderr

    for token in (by_id, by_prefix):
        with live.client(token) as api:
            answer = api.get("/v1/jobs")
        assert answer.status_code == 401
        assert answer.headers["content-type"] == "application/problem+json"
        assert "revoked" in answer.json()["detail"]
    assert not any(_reads_reports(s) for s in sessions)  # the cookies are still well signed
    refused = sessions[0].post("/reports/sign-in", data={"token": by_id})
    assert refused.status_code == 401 and "foldwise_session=" not in refused.headers.get(
        "set-cookie", ""
    )
    assert all(r["revoked_at"] and not r["live"] for r in _listed(live, team))
    for client in sessions:
        client.close()


@pytest.mark.parametrize(
    ("args", "field"),
    [
        (("revoke", "999999999"), "ID_OR_PREFIX"),
        (("revoke", "fw_"), "ID_OR_PREFIX"),
        (("revoke", "not-a-token"), "ID_OR_PREFIX"),
        (("create", "--team", "x", "--scopes", "read", "--expires-in", "0"), "--expires-in"),
        (("create", "--team", "x", "--scopes", "read", "--expires-in", "-3"), "--expires-in"),
        (("create", "--team", "x", "--scopes", "read", "--expires-in", "99999"), "--expires-in"),
    ],
)
def test_bad_token_commands_exit_2_with_one_sentence(
    live: Server, args: tuple[str, ...], field: str
) -> None:
    before = _cli(live, "list", "--json").stdout
    done = _cli(live, *args)
    assert done.returncode == 2, done.stderr
    assert done.stdout == "" and "Traceback" not in done.stderr
    assert done.stderr.startswith(f"error: {field}:")
    assert _cli(live, "list", "--json").stdout == before


def test_a_bad_token_command_exits_2_from_the_console_script(live: Server) -> None:
    """The refusal above, end to end: the real console script's exit code and streams."""
    before = _cli(live, "list", "--json").stdout
    done = _script(live, "create", "--team", "x", "--scopes", "read", "--expires-in", "0")
    assert done.returncode == 2, done.stderr
    assert done.stdout == "" and "Traceback" not in done.stderr
    assert done.stderr.startswith("error: --expires-in:")
    assert _cli(live, "list", "--json").stdout == before


def test_a_prefix_shared_by_two_tokens_names_them_and_revokes_neither(live: Server) -> None:
    team = f"t-{uuid.uuid4().hex[:6]}"
    shared = "fw_" + uuid.uuid4().hex[:5]
    # two stored tokens whose shown prefixes start alike (random ones practically never do)
    with live.sessions.begin() as session:
        rows = [
            ApiToken(
                token_hash=hash_token(uuid.uuid4().hex),
                prefix=f"{shared}{n}{n}{n}",
                team=team,
                scopes=["read"],
            )
            for n in range(2)
        ]
        session.add_all(rows)
        session.flush()
        ids = sorted(r.id for r in rows)
    answer = _cli(live, "revoke", shared)
    assert answer.returncode == 2, answer.stderr
    assert f"ids {ids[0]}, {ids[1]}" in answer.stderr and "give the id" in answer.stderr
    assert all(r["revoked_at"] is None for r in _listed(live, team))


def test_an_expired_token_gets_401_and_its_session_ends(live: Server) -> None:
    team = f"t-{uuid.uuid4().hex[:6]}"
    # 0.0003 days = 25.9 s: long enough to be used before it ends on a busy machine
    token = _create(live, team, "--expires-in", "0.0003")
    (row,) = _listed(live, team)
    expires = datetime.fromisoformat(row["expires_at"])
    session = _signed_in(live, token)
    with live.client(token) as api:
        assert api.get("/v1/jobs").status_code == 200
    assert _reads_reports(session)
    wait = expires.timestamp() - time.time() + 1
    assert wait > 0, "the token expired before it could be used once"
    time.sleep(wait)
    with live.client(token) as api:
        answer = api.get("/v1/jobs")
    assert answer.status_code == 401 and "expired" in answer.json()["detail"]
    assert not _reads_reports(session)
    (row,) = _listed(live, team)
    assert row["revoked_at"] is None and not row["live"]
    session.close()


def test_token_create_says_what_it_made_on_stderr(live: Server) -> None:
    team = f"t-{uuid.uuid4().hex[:6]}"
    made = _script(live, "create", "--team", team, "--scopes", "read", "--expires-in", "7")
    token = made.stdout.strip()
    assert made.stdout == token + "\n"
    assert token[:11] in made.stderr and token not in made.stderr
    assert "expires in 7 days" in made.stderr
