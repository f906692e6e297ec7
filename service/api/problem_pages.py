"""One page per problem type, so every RFC 9457 `type` the API sends resolves on this server."""

from __future__ import annotations

from collections.abc import Awaitable, Callable
from html import escape

from fastapi import APIRouter
from fastapi.responses import HTMLResponse

from service.http.problems import PROBLEM_BASE, PROBLEM_TYPES, ProblemType

router = APIRouter(tags=["problems"])

_PAGE = """<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>{title}</title></head>
<body><main>
<h1>{title}</h1>
<p>HTTP status {status}. Problem documents of this kind carry <code>"type": "{uri}"</code>.</p>
<p>{explanation}</p>
<p>The <code>detail</code> member says what went wrong this time; <code>field</code>, when
present, names the input to fix. <a href="{base}">All problem types</a>.</p>
</main></body></html>
"""


def _render(kind: ProblemType) -> str:
    return _PAGE.format(
        title=escape(kind.title),
        status=kind.status,
        uri=escape(kind.uri),
        explanation=escape(kind.explanation),
        base=PROBLEM_BASE,
    )


def _page_route(kind: ProblemType) -> Callable[[], Awaitable[HTMLResponse]]:
    page = _render(kind)

    async def show() -> HTMLResponse:
        return HTMLResponse(page)

    show.__doc__ = f"{kind.title} (HTTP {kind.status}): what it means and what to do."
    return show


@router.get("/problems/", response_class=HTMLResponse, summary="Every problem type this API sends")
async def problem_index() -> HTMLResponse:
    """A list of the problem types, each linking to its page."""
    items = "".join(
        f'<li><a href="{escape(kind.uri)}">{escape(kind.title)}</a> (HTTP {kind.status})</li>'
        for kind in PROBLEM_TYPES
    )
    return HTMLResponse(
        '<!doctype html><html lang="en"><head><meta charset="utf-8">'
        f"<title>Problem types</title></head><body><main><h1>Problem types</h1><ul>{items}</ul>"
        "</main></body></html>"
    )


# One route per type (not one /problems/{slug} route) so the OpenAPI document lists each page.
for _kind in PROBLEM_TYPES:
    router.add_api_route(
        _kind.uri,
        _page_route(_kind),
        methods=["GET"],
        response_class=HTMLResponse,
        summary=f"Problem type: {_kind.title}",
        operation_id=f"problem_{_kind.slug.replace('-', '_')}",
    )
