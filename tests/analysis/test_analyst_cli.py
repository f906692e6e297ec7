"""The analysts' commands as a user runs them against the live server.

Signing in, opening the page and the exit codes without a server run the console script; the
other commands run in this process (tests/cli/runner.py) with the same arguments and checks.
"""

from __future__ import annotations

import csv
import io
import json
import os
import stat
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest
from api.server import REPO, free_port
from cli.runner import run_foldwise_in_process

from .conftest import Seeded


@dataclass(frozen=True)
class Ran:
    """Exit code and output of one command."""

    code: int
    stdout: str
    stderr: str


def _script(*args: str, home: Path, **env: str) -> Ran:
    """`foldwise ARGS` as the real console script, in a process of its own."""
    clean = {k: v for k, v in os.environ.items() if not k.startswith("FOLDWISE_")}
    clean |= {"FOLDWISE_HOME": str(home), "PYTHONPATH": str(REPO), **env}
    proc = subprocess.run(
        [sys.executable, "-m", "service.cli.main", *args],
        env=clean,
        cwd=home.parent,
        stdin=subprocess.DEVNULL,
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )
    return Ran(proc.returncode, proc.stdout, proc.stderr)


def _run(*args: str, home: Path, **env: str) -> Ran:
    """`foldwise ARGS` in this process, as the same command line with the same environment.

    What these cases check is the command's answer, not the process start; a process per call
    costs seconds of imports. Signing in, opening a browser and the exit codes 1 and 2 without a
    server run as the console script (`_script`).
    """
    out = run_foldwise_in_process(*args, cwd=home.parent, env={"FOLDWISE_HOME": str(home), **env})
    return Ran(out.code, out.stdout, out.stderr)


@pytest.fixture
def as_lab(seeded: Seeded) -> dict[str, str]:
    """The environment that points the commands at the server with lab's token."""
    return {"FOLDWISE_URL": seeded.server.base_url, "FOLDWISE_TOKEN": seeded.lab}


def _listing(seeded: Seeded, path: str, **params: Any) -> Any:
    with seeded.server.client(seeded.lab) as client:
        answer = client.get(path, params=params)
    assert answer.status_code == 200
    return answer.json()


def test_login_writes_a_private_config_the_commands_use(seeded: Seeded, tmp_path: Path) -> None:
    home = tmp_path / "home"
    ran = _script("login", "--url", seeded.server.base_url, "--token", seeded.lab, home=home)
    assert ran.code == 0, ran.stderr
    config = home / "client.json"
    assert stat.S_IMODE(config.stat().st_mode) == 0o600  # it holds a bearer token
    assert json.loads(config.read_text()) == {"url": seeded.server.base_url, "token": seeded.lab}
    listed = _script("jobs", "--json", home=home)  # no FOLDWISE_URL/TOKEN: the file is enough
    assert listed.code == 0, listed.stderr
    assert json.loads(listed.stdout) == _listing(seeded, "/v1/jobs", limit=50)


def test_jobs_by_dataset_as_json_and_as_a_table(
    seeded: Seeded, tmp_path: Path, as_lab: dict[str, str]
) -> None:
    iris = seeded.jobs["A"]["dataset_hash"]
    ran = _run("jobs", "--dataset-hash", iris, "--json", home=tmp_path / "h", **as_lab)
    assert ran.code == 0, ran.stderr
    body = json.loads(ran.stdout)
    assert body == _listing(seeded, "/v1/jobs", dataset_hash=iris, limit=50)
    assert body["count"] == 3
    table = _run("jobs", "--status", "succeeded", home=tmp_path / "h", **as_lab)
    assert table.code == 0
    for letter in "ABC":
        assert seeded.jobs[letter]["id"] in table.stdout
    assert seeded.jobs["D"]["id"] not in table.stdout  # the other team's


def test_result_prints_result_v1_or_a_summary(
    seeded: Seeded, tmp_path: Path, as_lab: dict[str, str]
) -> None:
    job = seeded.jobs["A"]
    ran = _run("result", job["id"], "--json", home=tmp_path / "h", **as_lab)
    assert ran.code == 0 and json.loads(ran.stdout) == job["result"]
    readable = _run("result", job["id"], home=tmp_path / "h", **as_lab)
    assert readable.code == 0 and "Final pick" in readable.stdout
    assert f"{job['result']['estimate']['accuracy']['mean']:.4f}" in readable.stdout


def test_scores_stream_as_csv_and_json(
    seeded: Seeded, tmp_path: Path, as_lab: dict[str, str]
) -> None:
    job_id = seeded.jobs["B"]["id"]
    listing = _listing(seeded, f"/v1/jobs/{job_id}/fold-scores", limit=1000)["data"]
    ran = _run("scores", job_id, "--format", "csv", home=tmp_path / "h", **as_lab)
    assert ran.code == 0, ran.stderr
    rows = list(csv.DictReader(io.StringIO(ran.stdout)))
    assert [int(r["id"]) for r in rows] == [r["id"] for r in listing]
    assert [float(r["value"]) for r in rows] == [r["value"] for r in listing]
    as_json = _run("scores", job_id, "--format", "json", home=tmp_path / "h", **as_lab)
    assert as_json.code == 0 and json.loads(as_json.stdout) == listing


def test_compare_as_json_and_readable(
    seeded: Seeded, tmp_path: Path, as_lab: dict[str, str]
) -> None:
    a, b = seeded.jobs["A"]["id"], seeded.jobs["B"]["id"]
    ran = _run("compare", a, b, "--json", home=tmp_path / "h", **as_lab)
    assert ran.code == 0
    assert json.loads(ran.stdout) == _listing(seeded, "/v1/compare", jobs=f"{a},{b}")
    readable = _run("compare", a, b, home=tmp_path / "h", **as_lab)
    assert (
        "corrected resampled t-test" in readable.stdout and "balanced_accuracy" in readable.stdout
    )
    # each metric's interval on the difference, as the API answered it
    for row in json.loads(ran.stdout)["metrics"]:
        band = row["interval"]
        line = (
            f"{row['metric']}: 90% interval, corrected resampled t — no extra fits on the "
            f"difference: {band['lower']:+.4f} to {band['upper']:+.4f}"
        )
        assert line in readable.stdout.splitlines()


def test_report_prints_and_opens_the_page(
    seeded: Seeded, tmp_path: Path, as_lab: dict[str, str]
) -> None:
    job_id = seeded.jobs["A"]["id"]
    expected = f"{seeded.server.base_url}/reports/jobs/{job_id}"
    ran = _script("report", job_id, home=tmp_path / "h", **as_lab)
    assert (ran.code, ran.stdout.strip()) == (0, expected)
    # webbrowser honours BROWSER: a stand-in browser that notes the address it was given
    opened = tmp_path / "opened.txt"
    browser = tmp_path / "browser.sh"
    browser.write_text(f'#!/bin/sh\nprintf "%s" "$1" > {opened}\n')
    browser.chmod(0o755)
    ran = _script("report", job_id, "--open", home=tmp_path / "h", BROWSER=str(browser), **as_lab)
    assert ran.code == 0, ran.stderr
    assert opened.read_text() == expected


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (("result", "nosuchjob"), "no job 'nosuchjob'"),
        (("scores", "nosuchjob", "--format", "csv"), "no job 'nosuchjob'"),
        (("compare", "A", "D"), "is visible"),
        (("report", "nosuchjob"), "no job 'nosuchjob'"),
    ],
)
def test_client_errors_exit_2_with_the_problem_detail(
    seeded: Seeded, tmp_path: Path, as_lab: dict[str, str], args: tuple[str, ...], needle: str
) -> None:
    resolved = [seeded.jobs[a]["id"] if a in seeded.jobs else a for a in args]
    ran = _run(*resolved, home=tmp_path / "h", **as_lab)
    assert ran.code == 2 and needle in ran.stderr
    assert len(ran.stderr.strip().splitlines()) == 1 and "Traceback" not in ran.stderr
    assert ran.stdout == ""


def test_unreachable_server_exits_1_and_missing_config_exits_2(tmp_path: Path) -> None:
    nobody = f"http://127.0.0.1:{free_port()}"
    ran = _script("jobs", home=tmp_path / "h", FOLDWISE_URL=nobody, FOLDWISE_TOKEN="fw_x")
    assert ran.code == 1 and "cannot reach" in ran.stderr
    unset = _script("jobs", home=tmp_path / "h")
    assert unset.code == 2 and "FOLDWISE_URL" in unset.stderr
