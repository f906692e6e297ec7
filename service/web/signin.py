"""The report pages' sign-in cookie: a signed token id and expiry, never the token itself.

The value is `<token id>.<expiry unix seconds>.<hex HMAC-SHA256>` under FOLDWISE_SECRET_KEY. With no
key set (the embedded default) each server process draws a random key at start: sign-ins then end
when the server restarts, and several API processes would not accept each other's cookies, so a
deployment with more than one process must set the key.
"""

from __future__ import annotations

import hashlib
import hmac
import os
import secrets
import time
from dataclasses import dataclass

from sqlalchemy.orm import Session

from service.auth import Action, Principal, has_scope, is_live, live_token, principal_of
from service.store.models import ApiToken

# The name browsers already hold; only the module's word for it changed ("sign-in", not
# "session", which means a SQLAlchemy session everywhere else).
COOKIE = "foldwise_session"
LIFETIME_SECONDS = 8 * 3600
_PROCESS_KEY = secrets.token_bytes(32)


def secret_key(env: dict[str, str] | None = None) -> bytes:
    """FOLDWISE_SECRET_KEY as bytes, or this process's random key when it is unset."""
    raw = (os.environ if env is None else env).get("FOLDWISE_SECRET_KEY")
    return raw.encode() if raw else _PROCESS_KEY


def _mac(key: bytes, body: str) -> str:
    return hmac.new(key, body.encode(), hashlib.sha256).hexdigest()


def sign(key: bytes, token_id: int, *, now: float | None = None) -> str:
    """A cookie value for the token with this id, valid for LIFETIME_SECONDS."""
    expires = int((time.time() if now is None else now) + LIFETIME_SECONDS)
    body = f"{token_id}.{expires}"
    return f"{body}.{_mac(key, body)}"


def verify(key: bytes, value: str, *, now: float | None = None) -> int | None:
    """The token id of a well-signed, unexpired cookie value, else None."""
    parts = value.split(".")
    if len(parts) != 3 or not parts[0].isdigit() or not parts[1].isdigit():
        return None
    body = f"{parts[0]}.{parts[1]}"
    if not hmac.compare_digest(_mac(key, body), parts[2]):
        return None
    if int(parts[1]) < (time.time() if now is None else now):
        return None
    return int(parts[0])


@dataclass(frozen=True)
class Reader:
    """A signed-in reader: the token row's id and the principal it acts as."""

    token_id: int
    principal: Principal


def _reader(row: ApiToken | None) -> Reader | None:
    if row is None or not is_live(row):
        return None
    principal = principal_of(row)
    return Reader(row.id, principal) if has_scope(principal, Action.READ) else None


def reader_for_token(session: Session, token: str) -> Reader | None:
    """The reader behind a pasted token, if it is valid, unrevoked, unexpired and may read."""
    return _reader(live_token(session, token))


def reader_for_id(session: Session, token_id: int) -> Reader | None:
    """The reader of a cookie's token id; a token revoked or expired since sign-in reads no more."""
    return _reader(session.get(ApiToken, token_id))
