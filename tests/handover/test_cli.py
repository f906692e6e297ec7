"""The command line over the package's client: submit, model, predictions, and result locally.

Runs the real console script in a subprocess against the session's live server (or, for
`result --local`, against the store a local `foldwise select` wrote).
"""

from __future__ import annotations

import copy
import hashlib
import json
import os
import sqlite3
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import skops.io as sio

from .conftest import PROBA_JOB, Handover

REPO = Path(__file__).resolve().parents[2]
# a small job on iris (shipped with scikit-learn) for the local run
LOCAL_JOB = {
    "dataset": {"sample": "iris"},
    "target": "target",
    "task": "classification",
    "families": [{"estimator": "GaussianNB"}],
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 2, "seed": 1},
    "metrics": ["accuracy"],
}


@dataclass(frozen=True)
class Ran:
    """Exit code and output of one command."""

    code: int
    stdout: str
    stderr: str


def run(*args: str, home: Path, **env: str) -> Ran:
    """`foldwise ARGS` with only the FOLDWISE_* variables given here."""
    clean = {k: v for k, v in os.environ.items() if not k.startswith("FOLDWISE_")}
    clean |= {"FOLDWISE_HOME": str(home), "PYTHONPATH": str(REPO), **env}
    proc = subprocess.run(
        [sys.executable, "-m", "service.cli.main", *args],
        env=clean,
        cwd=home.parent,
        stdin=subprocess.DEVNULL,
        capture_output=True,
        text=True,
        timeout=300,
        check=False,
    )
    return Ran(proc.returncode, proc.stdout, proc.stderr)


def _server(handover: Handover) -> dict[str, str]:
    return {"FOLDWISE_URL": handover.server.base_url, "FOLDWISE_TOKEN": handover.token}


def test_submit_waits_and_a_repeat_with_the_key_names_the_same_job(
    handover: Handover, tmp_path: Path
) -> None:
    job_file = tmp_path / "job.json"
    job_file.write_text(json.dumps(PROBA_JOB))  # the store holds every unit: reused, quick
    home = tmp_path / "h"
    first = run(
        "submit",
        str(job_file),
        "--wait",
        "--json",
        "--idempotency-key",
        "cli-1",
        home=home,
        **_server(handover),
    )
    assert first.code == 0, first.stderr
    job = json.loads(first.stdout)
    assert job["status"] == "succeeded"
    assert job["result"]["estimate"] == handover.jobs["proba"]["result"]["estimate"]
    again = run(
        "submit", str(job_file), "--idempotency-key", "cli-1", home=home, **_server(handover)
    )
    assert again.code == 0, again.stderr
    assert again.stdout.strip() == job["id"]


def test_submit_refuses_a_bad_request_with_one_sentence(handover: Handover, tmp_path: Path) -> None:
    job_file = tmp_path / "job.json"
    job_file.write_text(json.dumps({**PROBA_JOB, "slices": ["no such column"]}))
    ran = run("submit", str(job_file), home=tmp_path / "h", **_server(handover))
    assert ran.code == 2
    assert "slices[0]" in ran.stderr and "not in the table" in ran.stderr
    assert "Traceback" not in ran.stderr


def test_model_download_and_card(handover: Handover, tmp_path: Path) -> None:
    job = handover.jobs["proba"]
    target = tmp_path / "model.skops"
    ran = run("model", job["id"], "-o", str(target), home=tmp_path / "h", **_server(handover))
    assert ran.code == 0, ran.stderr
    digest = hashlib.sha256(target.read_bytes()).hexdigest()
    assert digest == ran.stdout.strip() == job["result"]["final_pick"]["model_sha256"]
    assert sio.get_untrusted_types(file=target) == []
    card = run("model", job["id"], "--card", home=tmp_path / "h", **_server(handover))
    assert card.code == 0, card.stderr
    assert card.stdout.startswith("# Model card: LogisticRegression")
    missing = run(
        "model", "0" * 32, "-o", str(tmp_path / "x"), home=tmp_path / "h", **_server(handover)
    )
    assert missing.code == 2 and "no job" in missing.stderr


def test_predictions_command_writes_the_csv(handover: Handover, tmp_path: Path) -> None:
    job = handover.jobs["regression"]
    ran = run("predictions", job["id"], home=tmp_path / "h", **_server(handover))
    assert ran.code == 0, ran.stderr
    lines = ran.stdout.splitlines()
    assert lines[0].startswith("row,repeat,fold,candidate_key,actual,predicted")
    assert len(lines) == job["result"]["n_rows"] + 1


def test_result_reads_a_job_a_local_select_stored(tmp_path: Path) -> None:
    job_file = tmp_path / "local.json"
    job_file.write_text(json.dumps(copy.deepcopy(LOCAL_JOB)))
    home = tmp_path / "home"
    selected = run("select", str(job_file), "--json", home=home)
    assert selected.code == 0, selected.stderr
    stored = json.loads(selected.stdout)
    with sqlite3.connect(home / "foldwise.sqlite") as db:
        (job_id,) = db.execute("SELECT id FROM job").fetchone()
    ran = run("result", job_id, "--json", home=home)  # no server named: the local store
    assert ran.code == 0, ran.stderr
    assert json.loads(ran.stdout) == stored
    readable = run("result", job_id, "--local", home=home)
    assert readable.code == 0 and job_id in readable.stdout
    unknown = run("result", "f" * 32, home=home)
    assert unknown.code == 2 and "no job" in unknown.stderr
    nowhere = run("result", job_id, home=tmp_path / "empty")
    assert nowhere.code == 2 and "no local store" in nowhere.stderr
