"""Report pages under /reports: server-rendered HTML behind a signed sign-in cookie."""

from __future__ import annotations

import time
from functools import cache
from pathlib import Path
from typing import Annotated, Any
from urllib.parse import quote

from fastapi import APIRouter, Form, Query, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from jinja2 import Environment, FileSystemLoader, select_autoescape
from sqlalchemy import select

from service.errors import NotFound
from service.http.deps import SessionsDep
from service.http.origin import cross_site_reason
from service.jobs.queries.jobs import SUMMARY_ONLY, get_job, job_query
from service.store.models import Dataset
from service.web import dataset_view, handover_view, views
from service.web.compare_view import compare_page
from service.web.job_state import REFRESH_SECONDS
from service.web.signin import (
    COOKIE,
    LIFETIME_SECONDS,
    Reader,
    reader_for_id,
    reader_for_token,
    secret_key,
    sign,
    verify,
)

HERE = Path(__file__).parent
router = APIRouter(prefix="/reports", include_in_schema=False)

_env = Environment(
    loader=FileSystemLoader(HERE / "templates"),
    autoescape=select_autoescape(("html",)),
    trim_blocks=True,
    lstrip_blocks=True,
)
_env.filters["fmt"] = views.fmt
_env.globals.update(fmt=views.fmt, sig=views.sig, signed=views.signed, describe=views.describe)
_KEY = secret_key()


def _page(
    name: str, status: int = 200, *, started: float | None = None, **context: Any
) -> HTMLResponse:
    # Server-Timing reports the handler's time from its first query, so a slow page shows
    # whether the store or the template is to blame (the browser's devtools read it too)
    started = time.perf_counter() if started is None else started
    html = _env.get_template(name).render(**context)
    # pages carry scores a team may not want cached by a shared proxy
    headers = {
        "Cache-Control": "no-store",
        "X-Content-Type-Options": "nosniff",
        "Server-Timing": f"page;dur={(time.perf_counter() - started) * 1000:.1f}",
    }
    if context.get("refresh"):
        # a job still queued or running: the browser reloads the page itself (no script);
        # the page says so and links to a copy that stays still (`?still=1`)
        headers["Refresh"] = str(REFRESH_SECONDS)
    return HTMLResponse(html, status_code=status, headers=headers)


def _reader(request: Request, sessions: SessionsDep) -> Reader | None:
    value = request.cookies.get(COOKIE)
    token_id = verify(_KEY, value) if value else None
    if token_id is None:
        return None
    with sessions() as session:
        return reader_for_id(session, token_id)


def _to_sign_in(request: Request) -> RedirectResponse:
    target = request.url.path + (f"?{request.url.query}" if request.url.query else "")
    return RedirectResponse(f"/reports/sign-in?next={quote(target, safe='')}", status_code=303)


def _safe_next(target: str | None) -> str:
    # only our own pages: an absolute or protocol-relative URL would make sign-in an open redirect
    if target and target.startswith("/reports/") and not target.startswith("//"):
        return target
    return "/reports/"


def _missing(reader: Reader, what: str) -> HTMLResponse:
    return _page(
        "missing.html",
        404,
        title="Not found",
        detail=f"No {what} here is visible to team {reader.principal.team}.",
        reader=reader,
    )


@cache
def _stylesheet() -> str:
    return (HERE / "static" / "report.css").read_text(encoding="utf-8")


@router.get("/static/report.css")
def stylesheet() -> Response:
    """The pages' one stylesheet."""
    return Response(_stylesheet(), media_type="text/css", headers={"Cache-Control": "max-age=3600"})


def _refuse_cross_site(request: Request) -> Response | None:
    reason = cross_site_reason(request)
    if reason is None:
        return None
    return _page(
        "sign_in.html",
        403,
        title="Sign in",
        next="/reports/",
        error=f"{reason}; sign in from this server's own sign-in page.",
        reader=None,
    )


@router.get("/sign-in")
def sign_in_form(request: Request, sessions: SessionsDep, next: str | None = None) -> Response:
    """The sign-in form (or straight on, if the sign-in cookie is already good)."""
    if _reader(request, sessions) is not None:
        return RedirectResponse(_safe_next(next), status_code=303)
    return _page("sign_in.html", title="Sign in", next=_safe_next(next), error=None, reader=None)


@router.post("/sign-in")
def sign_in(
    request: Request,
    sessions: SessionsDep,
    token: Annotated[str, Form(max_length=500)] = "",
    next: Annotated[str, Form(max_length=2000)] = "/reports/",
) -> Response:
    """Check a pasted token; a reader gets a signed sign-in cookie, never the token itself."""
    refused = _refuse_cross_site(request)
    if refused is not None:
        return refused
    with sessions() as session:
        reader = reader_for_token(session, token) if token.strip() else None
    if reader is None:
        return _page(
            "sign_in.html",
            401,
            title="Sign in",
            next=_safe_next(next),
            error="token: this token is unknown, revoked or lacks the read scope; paste a token "
            "with the read scope.",
            reader=None,
        )
    answer = RedirectResponse(_safe_next(next), status_code=303)
    answer.set_cookie(
        COOKIE,
        sign(_KEY, reader.token_id),
        max_age=LIFETIME_SECONDS,
        path="/reports",
        httponly=True,
        samesite="strict",
        secure=request.url.scheme == "https",
    )
    return answer


@router.post("/sign-out")
def sign_out(request: Request) -> Response:
    """Forget the sign-in cookie."""
    refused = _refuse_cross_site(request)
    if refused is not None:
        return refused
    answer = RedirectResponse("/reports/sign-in", status_code=303)
    answer.delete_cookie(COOKIE, path="/reports", httponly=True, samesite="strict")
    return answer


@router.get("/")
def home(request: Request, sessions: SessionsDep) -> Response:
    """The newest jobs the reader may see."""
    reader = _reader(request, sessions)
    if reader is None:
        return _to_sign_in(request)
    with sessions() as session:
        jobs = list(session.scalars(job_query(reader.principal).options(*SUMMARY_ONLY).limit(50)))
        hashes = {job.dataset_hash for job in jobs}
        origins = session.execute(
            select(Dataset.content_hash, Dataset.origin).where(Dataset.content_hash.in_(hashes))
        )
        names = {h: dataset_view.table_name(dict(o or {})) for h, o in origins}
        return _page("home.html", title="Jobs", jobs=jobs, names=names, reader=reader)


@router.get("/jobs/{job_id}")
def job_report(
    job_id: str, request: Request, sessions: SessionsDep, still: bool = False
) -> Response:
    """One job: estimate and spread, outer picks, inner-score curves, optimism gap, cautions."""
    started = time.perf_counter()
    reader = _reader(request, sessions)
    if reader is None:
        return _to_sign_in(request)
    with sessions() as session:
        try:
            job = get_job(session, job_id[:64], reader.principal)
        except NotFound:
            return _missing(reader, "job")
        if job.kind == "learning_curve":
            context = views.learning_page(session, job)
            template = "learning.html"
        else:
            context = views.job_page(session, job)
            context["handover"] = handover_view.prediction_sections(
                session, job, request.app.state.settings
            )
            template = "job.html"
        context["refresh"] = context["refresh"] and not still
        context.update(still=still, refresh_seconds=REFRESH_SECONDS)
        return _page(template, started=started, reader=reader, **context)


@router.get("/datasets/{content_hash}")
def dataset_report(content_hash: str, request: Request, sessions: SessionsDep) -> Response:
    """One table: every visible job on it and its estimate over time."""
    reader = _reader(request, sessions)
    if reader is None:
        return _to_sign_in(request)
    with sessions() as session:
        try:
            context = dataset_view.dataset_page(session, content_hash[:64], reader.principal)
        except NotFound:
            return _missing(reader, "dataset")
        return _page("dataset.html", reader=reader, **context)


@router.get("/compare")
def compare_report(
    request: Request,
    sessions: SessionsDep,
    jobs: Annotated[str, Query(max_length=200)] = "",
) -> Response:
    """Two jobs side by side: per-fold differences and the corrected resampled t-test."""
    reader = _reader(request, sessions)
    if reader is None:
        return _to_sign_in(request)
    with sessions() as session:
        if not jobs:
            return _page(
                "compare.html",
                title="comparison",
                jobs="",
                error=None,
                rows=[],
                reader=reader,
                blank=True,
            )
        context = compare_page(session, jobs, reader.principal)
        status = 422 if context["error"] else 200
        return _page("compare.html", status, reader=reader, **context)
