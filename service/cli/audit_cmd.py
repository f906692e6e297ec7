"""`foldwise audit JOB`: recompute a job's stored scores here, in this process, and compare."""

from __future__ import annotations

import json
import sys
from typing import Annotated, Any

import typer
from rich.console import Console

from service.config import load_settings
from service.errors import BadInput

_stderr = Console(stderr=True)


def _summary(view: dict[str, Any]) -> str:
    report = view["report"] or {}
    if view["status"] != "done":
        return f"audit {view['id']} {view['status']}: {report.get('error', '')}"
    lines = [
        f"audit {view['id']} of job {view['job_id']}: {report['units_checked']} of "
        f"{report['units_in_job']} units recomputed, {report['scores_checked']} scores compared",
        f"  identical {report['identical']}, within tolerance {report['within_tolerance']} "
        f"(tolerance {view['tolerance']}), differing {report['differing']}, "
        f"missing {report['missing']}",
        f"  versions now: {report['versions_now']}",
    ]
    for item in report["items"]:
        if item["verdict"] in ("differing", "missing"):
            lines.append(
                f"  {item['verdict']}: fold score {item['fold_score_id']} {item['metric']} "
                f"stored {item['stored']!r} recomputed {item['recomputed']!r} "
                f"(stored with {item['stored_versions']})"
            )
    return "\n".join(lines)


def _run(job_id: str, fraction: float, seed: int, tolerance: float) -> dict[str, Any]:
    from service.jobs.audits.audit import audit_view, check_audit_request, request_audit, run_audit
    from service.store.db import make_engine, make_session_factory, upgrade_database
    from service.store.followup_models import Audit
    from service.store.models import Job

    settings = load_settings()
    fraction, seed, tolerance = check_audit_request(
        {"fraction": fraction, "seed": seed, "tolerance": tolerance}
    )
    upgrade_database(settings.database_url)
    engine = make_engine(settings.database_url)
    try:
        sessions = make_session_factory(engine)
        with sessions.begin() as session:
            job = session.get(Job, job_id)
            if job is None:
                raise BadInput("JOB", f"no job {job_id!r} in the store at {settings.database_url}.")
            audit_id = request_audit(
                session, job, fraction=fraction, seed=seed, tolerance=tolerance, team=job.team
            ).id
        run_audit(sessions, audit_id, settings)
        with sessions() as session:
            return audit_view(session.get_one(Audit, audit_id))
    finally:
        engine.dispose()


def audit(
    job_id: Annotated[str, typer.Argument(metavar="JOB", help="A job id in the local store.")],
    fraction: Annotated[
        float, typer.Option(help="Share of the job's scored units to recompute (0 < f <= 1).")
    ] = 1.0,
    seed: Annotated[int, typer.Option(help="Seed of the unit sample.")] = 0,
    tolerance: Annotated[
        float, typer.Option(help="Largest difference still counted as agreeing.")
    ] = 0.0,
    as_json: Annotated[bool, typer.Option("--json", help="Print the audit as JSON.")] = False,
) -> None:
    """Recompute a job's fold scores from scratch and compare them with the stored ones.

    Exit code 1 when a score differs (or the audit could not run), 2 for bad input.
    """
    try:
        view = _run(job_id, fraction, seed, tolerance)
    except BadInput as exc:
        _stderr.print(f"error: {exc}", markup=False, highlight=False, soft_wrap=True)
        raise typer.Exit(2) from None
    if as_json:
        sys.stdout.write(json.dumps(view) + "\n")
    else:
        sys.stdout.write(_summary(view) + "\n")
    report = view["report"] or {}
    if view["status"] != "done" or report.get("differing") or report.get("missing"):
        raise typer.Exit(1)
