"""The engine's one error type: a spec that cannot run, with the field that must change."""

from __future__ import annotations


class SpecError(ValueError):
    """A selection spec the caller must fix; `field` is the request path, `message` one sentence."""

    def __init__(self, field: str, message: str) -> None:
        super().__init__(f"{field}: {message}" if field else message)
        self.field = field
        self.message = message
