"""Job request v1: the selection spec plus the dataset reference, and its one-sentence errors."""

from __future__ import annotations

import re
from typing import Any

from pydantic import Field, StrictBool, ValidationError

from service.cv.spec import SelectionSpec
from service.datasets.sources import DatasetSource
from service.errors import BadInput
from service.json_values import check_json_values


class JobRequest(SelectionSpec):
    """The body of `POST /v1/jobs` and the file `foldwise select` reads."""

    dataset: str | DatasetSource
    # false: fit every unit afresh even when the store already holds its scores
    reuse: StrictBool = True
    # a URL notified when the job ends; must lie under the operator's FOLDWISE_WEBHOOK_ALLOW
    webhook: str | None = Field(default=None, min_length=1, max_length=2000)

    def spec(self) -> SelectionSpec:
        """The request without its dataset reference and reuse switch: what the engine sees."""
        service_fields = {"dataset", "reuse", "webhook"}
        return SelectionSpec.model_validate(self.model_dump(exclude=service_fields))


# model names pydantic puts in an error's location for a union's branches
_BRANCHES = {"str", "Recipe"}


def field_path(loc: tuple[int | str, ...]) -> str:
    """('families', 0, 'grid') -> 'families[0].grid'."""
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        elif part.startswith(("function-", "tagged-union", "literal[")) or part in _BRANCHES:
            continue  # pydantic's names for union branches, not fields of the request
        else:
            out += f".{part}" if out else part
    return out


def _sentence(error: dict[str, Any]) -> str:
    kind, msg = error["type"], error["msg"]
    if kind == "missing":
        return "is required; add it."
    if kind == "extra_forbidden":
        return "is not a field of job request v1; remove it or check its spelling."
    if kind == "literal_error":
        return f"{msg[0].lower()}{msg[1:]}."
    if kind == "value_error":
        return msg.removeprefix("Value error, ").rstrip(".") + "."
    return f"{msg[0].lower()}{msg[1:]} (got {error.get('input')!r})."


def bad_input_from(exc: ValidationError) -> BadInput:
    """The first problem of a validation error as one clear sentence naming the field."""
    errors = exc.errors()
    # a union (hash string or source object) reports a failure per branch: prefer the object's
    first = next((e for e in errors if "DatasetSource" in "".join(map(str, e["loc"]))), errors[0])
    # preprocess is "auto", "none" or a recipe object: an object is judged as a recipe
    if isinstance(first.get("input"), dict) and first["type"] == "literal_error":
        first = next((e for e in errors if "Recipe]" in "".join(map(str, e["loc"]))), first)
    field = field_path(tuple(first["loc"]))
    sentence = _sentence(dict(first))
    # our cross-field validators start their message with the field they are about
    named = re.match(r"^([a-z_]+): (.*)$", sentence)
    if named:
        field = f"{field}.{named.group(1)}" if field else named.group(1)
        sentence = named.group(2)
    return BadInput(field or "request", sentence)


def parse_job_request(data: Any) -> JobRequest:
    """Validate a decoded JSON body as job request v1; raises BadInput."""
    if not isinstance(data, dict):
        raise BadInput("request", "a job request must be a JSON object; see the README example.")
    check_json_values(data)
    try:
        return JobRequest.model_validate(data)
    except ValidationError as exc:
        raise bad_input_from(exc) from None
