"""RFC 9457 problem details: every 4xx and 5xx the API sends is `application/problem+json`."""

from __future__ import annotations

import logging
from collections.abc import Mapping
from dataclasses import dataclass
from http import HTTPStatus
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from pydantic import BaseModel, Field
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.routing import Match

from service.errors import BadInput, Conflict, MissingScope, NotFound
from service.jobs.intake.request import field_path

log = logging.getLogger(__name__)

PROBLEM_MEDIA_TYPE = "application/problem+json"
# Relative references (RFC 9457 section 3.1.1: resolved against the response's own URI), so each
# type names a page this very server serves (service/api/problem_pages.py), behind any host name.
PROBLEM_BASE = "/problems/"


@dataclass(frozen=True)
class ProblemType:
    """One kind of problem: its page's slug, the status it comes with, and what to do about it."""

    slug: str
    status: int
    title: str
    explanation: str

    @property
    def uri(self) -> str:
        """The `type` URI of problem documents of this kind."""
        return PROBLEM_BASE + self.slug


# One problem type per way a request can go wrong; clients branch on `type`, people read `detail`.
PROBLEM_TYPES: tuple[ProblemType, ...] = (
    ProblemType(
        "unreadable-body",
        400,
        "The request body could not be read",
        "The body is not valid JSON. Send one JSON object with Content-Type: application/json.",
    ),
    ProblemType(
        "unauthenticated",
        401,
        "A valid bearer token is required",
        "Send an Authorization: Bearer header with a token from `foldwise token create`; an "
        "unknown or revoked token is refused the same way.",
    ),
    ProblemType(
        "forbidden",
        403,
        "The token lacks the scope this route needs",
        "The token is valid but its scopes do not cover this route; `detail` names the scope "
        "needed. Ask an administrator for a token that has it.",
    ),
    ProblemType(
        "not-found",
        404,
        "No such resource",
        "No job, dataset, schedule or page with that id is visible to this token. Check the id.",
    ),
    ProblemType(
        "conflict",
        409,
        "The request conflicts with stored state",
        "The resource is not in a state that allows this request (for example cancelling a "
        "finished job); `detail` says which state it is in.",
    ),
    ProblemType(
        "too-large",
        413,
        "The request is larger than this server accepts",
        "The body exceeds the server's cap. Job requests are small JSON objects; tables go to "
        "/v1/datasets/upload, which has its own cap (FOLDWISE_MAX_UPLOAD_MB).",
    ),
    ProblemType(
        "bad-input",
        422,
        "The request has a field to fix",
        "A field of the request is missing or not valid; `field` names it and `detail` says "
        "what to change. Nothing of the request was stored.",
    ),
    ProblemType(
        "busy",
        429,
        "The server is at its limit of concurrent requests",
        "Too many heavy requests are in flight at once. Nothing was done; wait the seconds the "
        "Retry-After header gives and send the same request again.",
    ),
    ProblemType(
        "internal",
        500,
        "The server failed to handle the request",
        "An unexpected error; it is in the server's log. Try again later, and report it if it "
        "persists.",
    ),
    ProblemType(
        "unavailable",
        503,
        "A service this server depends on is unreachable",
        "The database or the broker does not answer; `detail` names which. Try again later.",
    ),
)
_BY_STATUS: dict[int, ProblemType] = {kind.status: kind for kind in PROBLEM_TYPES}


class Problem(BaseModel):
    """An RFC 9457 problem document; `field` names the input to fix, when there is one."""

    type: str = Field(description="A URI naming the kind of problem, or about:blank.")
    title: str = Field(description="A short summary of the kind of problem.")
    status: int = Field(description="The HTTP status code.")
    detail: str = Field(description="What went wrong this time, and what to do about it.")
    instance: str = Field(description="The path of the request that failed.")
    field: str | None = Field(
        default=None, description="The input at fault, e.g. families[0].grid.C."
    )


class ProblemError(Exception):
    """Raised anywhere in the API to answer with a problem document."""

    def __init__(
        self,
        status: int,
        detail: str,
        *,
        field: str | None = None,
        headers: Mapping[str, str] | None = None,
    ) -> None:
        super().__init__(detail)
        self.status, self.detail, self.field = status, detail, field
        self.headers = dict(headers or {})


def problem_type(status: int) -> tuple[str, str]:
    """The type URI and title for a status; about:blank with the reason phrase otherwise."""
    kind = _BY_STATUS.get(status)
    if kind is not None:
        return kind.uri, kind.title
    return "about:blank", HTTPStatus(status).phrase


def problem_response(
    request: Request | str,
    status: int,
    detail: str,
    *,
    field: str | None = None,
    headers: Mapping[str, str] | None = None,
) -> JSONResponse:
    """A problem document as a response; `request` may be given as its path alone."""
    kind, title = problem_type(status)
    instance = request if isinstance(request, str) else request.url.path
    body = Problem(
        type=kind, title=title, status=status, detail=detail, instance=instance, field=field
    )
    return JSONResponse(
        body.model_dump(exclude_none=True),
        status_code=status,
        media_type=PROBLEM_MEDIA_TYPE,
        headers=dict(headers or {}),
    )


def problem_responses(*statuses: int) -> dict[int | str, dict[str, Any]]:
    """The `responses=` of a route: each listed status documented as a Problem."""
    # The OpenAPI post-processing in app.py moves these schemas under application/problem+json.
    return {
        status: {"model": Problem, "description": problem_type(status)[1]} for status in statuses
    }


def _sentence(error: Mapping[str, Any]) -> str:
    kind, msg = str(error.get("type", "")), str(error.get("msg", "is not valid"))
    if kind == "missing":
        return "is required; add it."
    if kind == "extra_forbidden":
        return "is not a field of this request; remove it or check its spelling."
    if kind == "value_error":
        return msg.removeprefix("Value error, ").rstrip(".") + "."
    text = f"{msg[0].lower()}{msg[1:]}" if msg else "is not valid"
    if "input" in error and not isinstance(error["input"], dict | list):
        text += f" (got {error['input']!r})"
    return text + "."


def _validation_problem(request: Request, exc: RequestValidationError) -> JSONResponse:
    errors = list(exc.errors())
    first = errors[0] if errors else {"type": "", "msg": "the request is not valid"}
    loc = tuple(first.get("loc", ()))
    if first.get("type") == "json_invalid":
        ctx = first.get("ctx")
        reason = ctx.get("error", "not JSON") if isinstance(ctx, dict) else "not JSON"
        return problem_response(
            request,
            400,
            f"the body is not valid JSON ({reason} at character {loc[-1]}); send a JSON object.",
            field="request",
        )
    # loc starts with where the value came from (body, query, path, header); the rest is the field
    field = field_path(tuple(loc[1:])) or "request"
    if field == "request" and first.get("type") == "missing":
        return problem_response(
            request, 422, "the request has no body; send a JSON object.", field=field
        )
    if field == "request" and first.get("type") in ("dict_type", "model_attributes_type"):
        return problem_response(
            request,
            422,
            "the body must be a JSON object sent with Content-Type: application/json.",
            field=field,
        )
    return problem_response(request, 422, _sentence(first), field=field)


_METHODS = ("DELETE", "GET", "HEAD", "PATCH", "POST", "PUT")


def allowed_methods(request: Request) -> list[str]:
    """Every method some route of the app answers on this request's path."""
    # asked of the router itself (BaseRoute.matches), so routes of included routers count too
    allowed = []
    for method in _METHODS:
        scope = {**request.scope, "method": method}
        if any(route.matches(scope)[0] == Match.FULL for route in request.app.router.routes):
            allowed.append(method)
    return allowed


def install_problem_handlers(app: FastAPI) -> None:
    """Register the handlers that turn every error into a problem document."""

    async def on_problem(request: Request, exc: Exception) -> JSONResponse:
        assert isinstance(exc, ProblemError)
        return problem_response(
            request, exc.status, exc.detail, field=exc.field, headers=exc.headers
        )

    async def on_http(request: Request, exc: Exception) -> JSONResponse:
        assert isinstance(exc, StarletteHTTPException)
        detail = exc.detail if isinstance(exc.detail, str) else HTTPStatus(exc.status_code).phrase
        field = getattr(exc, "field", None)  # json_body.BodyProblem names the field
        headers = dict(exc.headers or {})
        if exc.status_code == 405:
            # Starlette names the methods of the first route that matched the path only
            allowed = allowed_methods(request)
            headers["Allow"] = ", ".join(allowed)
            detail = f"{request.method} is not a method of this path; use {' or '.join(allowed)}."
        elif exc.status_code == 404 and detail == HTTPStatus.NOT_FOUND.phrase:
            detail = "there is no route at this path; /openapi.json lists every route."
        return problem_response(request, exc.status_code, detail, field=field, headers=headers)

    async def on_validation(request: Request, exc: Exception) -> JSONResponse:
        assert isinstance(exc, RequestValidationError)
        return _validation_problem(request, exc)

    async def on_bad_input(request: Request, exc: Exception) -> JSONResponse:
        assert isinstance(exc, BadInput)
        return problem_response(request, 422, exc.message, field=exc.field or "request")

    async def on_conflict(request: Request, exc: Exception) -> JSONResponse:
        return problem_response(request, 409, str(exc))

    async def on_not_found(request: Request, exc: Exception) -> JSONResponse:
        # one sentence that says what to do, the same for "missing" and "not yours"
        detail = f"{str(exc).rstrip('.')}; check the id, and that your team may see it."
        return problem_response(request, 404, detail)

    async def on_missing_scope(request: Request, exc: Exception) -> JSONResponse:
        return problem_response(request, 403, str(exc))

    async def on_crash(request: Request, exc: Exception) -> JSONResponse:
        # The traceback goes to the log only: it can hold paths and data the caller must not see.
        log.error("unhandled error on %s %s", request.method, request.url.path, exc_info=exc)
        return problem_response(
            request, 500, "the server hit an unexpected error; it is logged, try again later."
        )

    app.add_exception_handler(ProblemError, on_problem)
    app.add_exception_handler(StarletteHTTPException, on_http)
    app.add_exception_handler(RequestValidationError, on_validation)
    app.add_exception_handler(BadInput, on_bad_input)
    app.add_exception_handler(Conflict, on_conflict)
    app.add_exception_handler(NotFound, on_not_found)
    app.add_exception_handler(MissingScope, on_missing_scope)
    app.add_exception_handler(Exception, on_crash)
