"""Errors that cross layers: bad input is the caller's to fix, everything else is ours."""

from __future__ import annotations


class BadInput(ValueError):
    """A request, file or option the caller must fix; `field` names where, the message says how."""

    def __init__(self, field: str, message: str) -> None:
        super().__init__(f"{field}: {message}" if field else message)
        self.field = field
        self.message = message
