"""Audits: a fresh recomputation compared with the store, in-process and by `foldwise audit`."""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from pathlib import Path
from typing import Any

from cli.runner import run_foldwise_in_process
from sqlalchemy import func, select, text
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings, load_settings
from service.jobs.audits.audit import request_audit, run_audit
from service.jobs.local.driver import run_embedded
from service.store.db import make_engine, make_session_factory
from service.store.models import Audit, FoldScore, Job, WorkUnit

from .conftest import make_request

REPO = Path(__file__).resolve().parents[2]


def _audit(
    sessions: sessionmaker[Session], settings: Settings, job_id: str, **options: Any
) -> dict[str, Any]:
    with sessions.begin() as session:
        job = session.get_one(Job, job_id)
        audit_id = request_audit(
            session,
            job,
            fraction=options.get("fraction", 1.0),
            seed=options.get("seed", 0),
            tolerance=options.get("tolerance", 0.0),
            team=job.team,
        ).id
    assert run_audit(sessions, audit_id, settings) == "done"
    with sessions() as session:
        report = session.get_one(Audit, audit_id).report
    assert report is not None
    return report


def _tamper(sessions: sessionmaker[Session], job_id: str, delta: float) -> int:
    """Change one stored score behind the service's back, as a faulty copy would; its id."""
    with sessions.begin() as session:
        score_id = session.scalars(
            select(FoldScore.id).where(FoldScore.job_id == job_id).order_by(FoldScore.id)
        ).first()
        assert score_id is not None
        session.execute(
            text("UPDATE fold_score SET value = value + :d WHERE id = :i"),
            {"d": delta, "i": score_id},
        )
    return score_id


def test_auditing_a_finished_job_finds_every_score_identical_then_the_tampered_one(
    pg_settings: Settings, pg_sessions: sessionmaker[Session]
) -> None:
    job_id = run_embedded(make_request(), settings=pg_settings).job_id
    with pg_sessions() as session:
        scored_units = session.scalar(
            select(func.count()).where(
                WorkUnit.job_id == job_id, WorkUnit.kind.in_(("inner", "outer_refit"))
            )
        )
        stored = int(session.scalar(select(func.count()).where(FoldScore.job_id == job_id)) or 0)
    clean = _audit(pg_sessions, pg_settings, job_id)
    assert clean["units_checked"] == scored_units
    assert clean["scores_checked"] == stored
    # same versions on both sides: recomputation is deterministic, so bit-for-bit equal
    assert clean["identical"] == stored and clean["differing"] == 0
    assert {i["stored_versions"]["scikit-learn"] for i in clean["items"]} == {
        clean["versions_now"]["scikit-learn"]
    }

    tampered = _tamper(pg_sessions, job_id, 0.01)
    found = _audit(pg_sessions, pg_settings, job_id)
    differing = [i for i in found["items"] if i["verdict"] == "differing"]
    assert [i["fold_score_id"] for i in differing] == [tampered]
    assert math.isclose(differing[0]["difference"], -0.01, abs_tol=1e-12)
    assert found["identical"] == stored - 1
    loose = _audit(pg_sessions, pg_settings, job_id, tolerance=0.02)
    assert loose["within_tolerance"] == 1 and loose["differing"] == 0


def test_a_fractional_audit_recomputes_a_seeded_sample(
    pg_settings: Settings, pg_sessions: sessionmaker[Session]
) -> None:
    job_id = run_embedded(make_request(), settings=pg_settings).job_id
    half = _audit(pg_sessions, pg_settings, job_id, fraction=0.5, seed=3)
    again = _audit(pg_sessions, pg_settings, job_id, fraction=0.5, seed=3)
    assert half["units_checked"] == math.ceil(0.5 * half["units_in_job"])
    assert [i["unit_id"] for i in half["items"]] == [i["unit_id"] for i in again["items"]]


def _foldwise(env: dict[str, str], *args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "service.cli.main", *args],
        env=env,
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=180,
    )


def test_the_audit_command_reports_identical_then_differing_and_refuses_bad_input(
    tmp_path: Path,
) -> None:
    env = {k: v for k, v in os.environ.items() if not k.startswith("FOLDWISE_")}
    env["FOLDWISE_HOME"] = str(tmp_path / "home")
    settings = load_settings(env)
    job_id = run_embedded(make_request(), settings=settings).job_id

    clean = _foldwise(env, "audit", job_id, "--json")
    assert clean.returncode == 0, clean.stderr
    report = json.loads(clean.stdout)["report"]
    assert report["differing"] == 0 and report["identical"] == report["scores_checked"] > 0

    engine = make_engine(settings.database_url)
    try:
        tampered = _tamper(make_session_factory(engine), job_id, 0.5)
    finally:
        engine.dispose()
    found = _foldwise(env, "audit", job_id)
    assert found.returncode == 1
    assert f"differing: fold score {tampered} " in found.stdout

    # refusals come before any recomputation: the same command line in this process (a process
    # per call costs seconds of imports; the two runs above are the console script's exit codes)
    mine = {"FOLDWISE_HOME": env["FOLDWISE_HOME"]}
    for args, field in ((["--fraction", "0"], "fraction"), (["--tolerance", "-1"], "tolerance")):
        refused = run_foldwise_in_process("audit", job_id, *args, cwd=REPO, env=mine)
        assert refused.code == 2
        assert refused.stderr.startswith(f"error: {field}:"), refused.stderr
        assert "Traceback" not in refused.stderr
    unknown = run_foldwise_in_process("audit", "0" * 32, cwd=REPO, env=mine)
    assert unknown.code == 2 and "no job" in unknown.stderr
