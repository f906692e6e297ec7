"""A cap on request bodies, answered with a 413 problem document.

FastAPI's per-route `max_body_size` answers 413 in plain text, replacing the problem document our
handlers build, so the cap lives here instead. Uploads are exempt: they stream to the spool under
their own, larger cap (FOLDWISE_MAX_UPLOAD_MB).
"""

from __future__ import annotations

from starlette.datastructures import Headers
from starlette.exceptions import HTTPException
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.http.problems import problem_response

JSON_BODY_LIMIT = 1 << 20
# the largest integer SQL stores (a signed 64-bit BIGINT): offsets and keyset ids past it would
# overflow the driver's conversion, so every list route bounds them with Query(le=...)
MAX_SQL_INT = 2**63 - 1


def _detail(limit: int) -> str:
    return (
        f"the body is larger than {limit // 1024} KiB; job requests and sources are small JSON "
        "objects, and tables go to /v1/datasets/upload."
    )


class BodyCap:
    """Refuse bodies over `limit` bytes on every path but the `exempt` ones."""

    def __init__(self, app: ASGIApp, limit: int = JSON_BODY_LIMIT, exempt: tuple[str, ...] = ()):
        self.app, self.limit, self.exempt = app, limit, exempt

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["path"] in self.exempt:
            await self.app(scope, receive, send)
            return
        declared = Headers(scope=scope).get("content-length", "")
        if declared.isdigit() and int(declared) > self.limit:
            # refused before a byte is read
            response = problem_response(scope["path"], 413, _detail(self.limit))
            await response(scope, receive, send)
            return
        seen = 0

        async def capped() -> Message:
            nonlocal seen
            message = await receive()
            if message["type"] == "http.request":
                seen += len(message.get("body", b""))
                if seen > self.limit:
                    # An HTTPException passes FastAPI's body reading untouched (other errors
                    # become a 400) and reaches the problem handler.
                    raise HTTPException(413, _detail(self.limit))
            return message

        await self.app(scope, capped, send)


class NoNulInUrl:
    """Refuse a path or query string holding a NUL character (%00) with a 400 problem.

    PostgreSQL's text columns cannot hold NUL, so an id or filter with one would fail inside the
    driver as a 500; SQLite would take it. Refused here, both stores answer alike.
    """

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] == "http":
            raw = scope.get("raw_path") or scope["path"].encode()
            query = scope.get("query_string", b"")
            if b"\x00" in raw or b"%00" in raw or b"%00" in query or b"\x00" in query:
                detail = (
                    "the address holds a NUL character (%00); remove it from the path and query."
                )
                response = problem_response(scope["path"].replace("\x00", ""), 400, detail)
                await response(scope, receive, send)
                return
        await self.app(scope, receive, send)
