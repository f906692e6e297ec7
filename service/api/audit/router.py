"""Audit routes (recompute stored scores and compare) and a job's provenance trail."""

from __future__ import annotations

import logging
from typing import Annotated, Any

from fastapi import APIRouter, Body, Path, Response
from sqlalchemy.orm import Session

from service.api.audit.schemas import AuditPublic, Provenance
from service.auth import Action, Principal, authorize
from service.errors import not_visible
from service.http.deps import AuditorDep, DispatcherDep, ReaderDep, SessionDep
from service.http.json_body import StrictJsonRoute
from service.http.problems import problem_responses
from service.jobs.audits.audit import audit_view, check_audit_request, request_audit
from service.jobs.queries import jobs as job_queries
from service.jobs.queries.jobs import foreign_job_ids
from service.jobs.queries.provenance import provenance
from service.store.followup_models import Audit

log = logging.getLogger(__name__)
router = APIRouter(prefix="/v1", tags=["audits"], route_class=StrictJsonRoute)

JobId = Annotated[str, Path(max_length=64, description="The job's id.")]
AuditId = Annotated[str, Path(max_length=64, description="The audit's id.")]
AUDIT_BODY = Body(
    description=(
        'Optional: {"fraction": 0 < f <= 1 (default 1.0), "seed": int (default 0), '
        '"tolerance": float >= 0 (default 0)}.'
    ),
)


def _shown(session: Session, principal: Principal, audit: Audit) -> AuditPublic:
    # an audited score may have been computed by another team's job: its id is not the caller's
    view = audit_view(audit)
    items = (view.get("report") or {}).get("items") or []
    hidden = foreign_job_ids(
        session, principal, {i["computed_by_job"] for i in items if i.get("computed_by_job")}
    )
    if hidden:
        view["report"] = {
            **view["report"],
            "items": [
                {**i, "computed_by_job": None} if i.get("computed_by_job") in hidden else i
                for i in items
            ],
        }
    return AuditPublic(**view)


@router.post(
    "/jobs/{job_id}/audit",
    response_model=AuditPublic,
    status_code=202,
    summary="Recompute a sample (or all) of a succeeded job's units and compare with the store",
    responses=problem_responses(400, 401, 403, 404, 413, 422),
)
def start_audit(
    job_id: JobId,
    principal: AuditorDep,
    session: SessionDep,
    dispatcher: DispatcherDep,
    response: Response,
    body: Annotated[dict[str, Any] | None, AUDIT_BODY] = None,
) -> AuditPublic:
    """202 with Location /v1/audits/{id}; the recomputation runs on a worker.

    Needs the `submit` scope and a job of the token's own team: another team's job answers 404,
    as a missing one does, analyst tokens included (they read other teams' work, never start it).
    """
    fraction, seed, tolerance = check_audit_request(body)
    job = job_queries.get_job(session, job_id, principal, Action.AUDIT)
    audit = request_audit(
        session, job, fraction=fraction, seed=seed, tolerance=tolerance, team=principal.team
    )
    session.commit()  # the worker must find the row
    try:
        dispatcher.publish_audit(audit.id)
    except Exception:
        log.exception("publishing audit %s failed; it stays queued", audit.id)
    response.headers["Location"] = f"/v1/audits/{audit.id}"
    return _shown(session, principal, audit)


@router.get(
    "/audits/{audit_id}",
    response_model=AuditPublic,
    summary="An audit: status and, once done, the comparison of every recomputed score",
    responses=problem_responses(401, 403, 404, 422),
)
def get_audit(audit_id: AuditId, principal: ReaderDep, session: SessionDep) -> AuditPublic:
    """Another team's audit is a 404 (analysts read every team's)."""
    audit = session.get(Audit, audit_id)
    if audit is None:
        raise not_visible("audit", audit_id)
    authorize(principal, Action.READ, audit.team, what="audit", ident=audit_id)
    return _shown(session, principal, audit)


@router.get(
    "/jobs/{job_id}/provenance",
    response_model=Provenance,
    summary="The job's whole trail: table, request, candidates, folds, units, scores, model",
    responses=problem_responses(401, 403, 404, 422),
)
def get_provenance(job_id: JobId, principal: ReaderDep, session: SessionDep) -> Provenance:
    """Who computed what, with which versions, and what audits found."""
    job = job_queries.get_job(session, job_id, principal)
    return Provenance(**provenance(session, job, principal))
