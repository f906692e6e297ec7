"""Statuses every operation can answer, added to the OpenAPI document where a route left them.

The middleware and handlers answer some statuses on every route of a kind, whatever the route
declares: a /v1 route without a valid token is a 401 and without its scope a 403; a route with
parameters or a body refuses bad ones with a 422; a body that is not JSON is a 400 and one past
the cap a 413; an address holding a NUL character is a 400
everywhere. A client generated from the document (or a fuzzer checking it) must see them.
"""

from __future__ import annotations

from typing import Any

from service.http.problems import PROBLEM_MEDIA_TYPE, problem_type

_PROBLEM_REF = {"$ref": "#/components/schemas/Problem"}


def _problem_answer(status: int) -> dict[str, Any]:
    return {
        "description": problem_type(status)[1],
        "content": {PROBLEM_MEDIA_TYPE: {"schema": _PROBLEM_REF}},
    }


def add_shared_statuses(document: dict[str, Any]) -> None:
    """Document 400/401/403/413/422 on every operation that can answer them."""
    for path, item in document.get("paths", {}).items():
        for method, operation in item.items():
            if method not in ("get", "post", "put", "patch", "delete"):
                continue
            # any address may carry a NUL character, refused with a 400 (limits.NoNulInUrl)
            statuses: set[int] = {400}
            if path.startswith("/v1/"):
                statuses |= {401, 403}
            if operation.get("parameters") or "requestBody" in operation:
                statuses.add(422)
            if "requestBody" in operation:
                statuses.add(413)
            answers = operation.setdefault("responses", {})
            for status in sorted(statuses):
                answers.setdefault(str(status), _problem_answer(status))
