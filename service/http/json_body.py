"""JSON bodies read strictly: no NaN or Infinity, bounded nesting, problems that name the field.

Every router is built with `route_class=StrictJsonRoute`, so FastAPI reads a JSON body through
`StrictJsonRequest.json` below: Python's json module accepts `NaN`/`Infinity` (not JSON) and
would let them reach the request hash or the store, and its recursion error on deep nesting
would be answered with a bare "error parsing the body".
"""

from __future__ import annotations

import json
from collections.abc import Callable, Coroutine
from typing import Any

from fastapi import Request, Response
from fastapi.routing import APIRoute
from starlette.exceptions import HTTPException

from service.errors import BadInput
from service.json_values import check_json_values


class BodyProblem(HTTPException):
    """A JSON body refused while it is read; FastAPI passes HTTPExceptions through untouched."""

    def __init__(self, status_code: int, detail: str, field: str) -> None:
        super().__init__(status_code, detail)
        self.field = field


class StrictJsonRequest(Request):
    """A request whose JSON body holds only finite numbers and is at most a few levels deep."""

    async def json(self) -> Any:
        """The decoded body; a problem (400 or 422) naming the field otherwise."""
        if not hasattr(self, "_json"):
            body = await self.body()
            try:
                value = json.loads(body)
            except json.JSONDecodeError:
                raise  # FastAPI answers with the position; our handler makes it a 400 problem
            except RecursionError:
                detail = "the body is nested too deeply to read; send a flat JSON object."
                raise BodyProblem(400, detail, "request") from None
            except ValueError as exc:  # e.g. an integer of more than 4,300 digits
                detail = f"the body could not be read as JSON ({exc}); send a JSON object."
                raise BodyProblem(400, detail, "request") from None
            try:
                check_json_values(value)
            except BadInput as exc:
                raise BodyProblem(422, exc.message, exc.field) from None
            self._json = value
        return self._json


class StrictJsonRoute(APIRoute):
    """An API route that reads its body through StrictJsonRequest."""

    def get_route_handler(self) -> Callable[[Request], Coroutine[Any, Any, Response]]:
        """FastAPI's handler, handed the strict request."""
        handler = super().get_route_handler()

        async def strict(request: Request) -> Response:
            return await handler(StrictJsonRequest(request.scope, request.receive))

        return strict
