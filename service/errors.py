"""Errors that cross layers: bad input is the caller's to fix, everything else is ours."""

from __future__ import annotations


class BadInput(ValueError):
    """A request, file or option the caller must fix; `field` names where, the message says how."""

    def __init__(self, field: str, message: str) -> None:
        super().__init__(f"{field}: {message}" if field else message)
        self.field = field
        self.message = message


class NotFound(LookupError):
    """No such object, or not one the caller may see (the two are not told apart)."""


class Conflict(Exception):
    """The request clashes with stored state (an idempotency key reused with another body)."""


def not_visible(what: str, ident: object) -> NotFound:
    """The one answer for both "there is no such object" and "it is not yours"."""
    return NotFound(f"no {what} {ident!r} is visible to your team.")


class MissingScope(PermissionError):
    """The caller's token lacks the scope an action needs (said without looking at any object)."""

    def __init__(self, scope: str, held: frozenset[str]) -> None:
        super().__init__(
            f"this action needs a token with the {scope!r} scope; this token has "
            f"{', '.join(sorted(held)) or 'none'}."
        )
        self.scope = scope
