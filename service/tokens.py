"""Looking after stored tokens: list them (never the token, only its shown prefix) and revoke."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.auth import TOKEN_PREFIX, hash_token, is_live
from service.errors import BadInput
from service.store.db import utcnow
from service.store.models import ApiToken


def _when(moment: datetime | None) -> str | None:
    return moment.isoformat() if moment is not None else None


def token_view(row: ApiToken, now: datetime | None = None) -> dict[str, Any]:
    """What `token list` shows of a token: never the token or its hash."""
    return {
        "id": row.id,
        "prefix": row.prefix,
        "team": row.team,
        "scopes": list(row.scopes),
        "analyst": bool(row.analyst),
        "created_at": _when(row.created_at),
        "expires_at": _when(row.expires_at),
        "revoked_at": _when(row.revoked_at),
        "live": is_live(row, now),
    }


def list_tokens(session: Session, team: str | None = None) -> list[dict[str, Any]]:
    """Every stored token (of one team, if given), oldest first."""
    query = select(ApiToken).order_by(ApiToken.id)
    if team is not None:
        query = query.where(ApiToken.team == team)
    now = utcnow()
    return [token_view(row, now) for row in session.scalars(query)]


def find_token(session: Session, ident: str) -> ApiToken:
    """The one token named by its id, its shown prefix (or a longer start of it), or itself."""
    ident = ident.strip()
    if ident.isdigit():
        row = session.get(ApiToken, int(ident))
        if row is None:
            raise BadInput("ID_OR_PREFIX", f"no token has id {ident}; `foldwise token list`.")
        return row
    if not ident.startswith(TOKEN_PREFIX) or len(ident) < len(TOKEN_PREFIX) + 4:
        raise BadInput(
            "ID_OR_PREFIX",
            f"give a token's id or its prefix ({TOKEN_PREFIX}... with at least 4 more characters), "
            "as `foldwise token list` shows them.",
        )
    whole = session.scalars(select(ApiToken).where(ApiToken.token_hash == hash_token(ident)))
    found = whole.one_or_none()
    if found is not None:
        return found
    # a prefix: the stored one is short, so a longer start of the token matches on its prefix
    rows = [
        row
        for row in session.scalars(select(ApiToken).where(ApiToken.prefix.is_not(None)))
        if row.prefix and (row.prefix.startswith(ident) or ident.startswith(row.prefix))
    ]
    if not rows:
        raise BadInput("ID_OR_PREFIX", f"no token starts with {ident!r}; `foldwise token list`.")
    if len(rows) > 1:
        ids = ", ".join(str(r.id) for r in rows)
        raise BadInput(
            "ID_OR_PREFIX", f"{ident!r} starts {len(rows)} tokens (ids {ids}); give the id."
        )
    return rows[0]


def revoke_token(session: Session, ident: str) -> tuple[ApiToken, bool]:
    """Revoke the named token now; False when it had been revoked already (kept as it was)."""
    row = find_token(session, ident)
    if row.revoked_at is not None:
        return row, False
    row.revoked_at = utcnow()
    session.flush()
    return row, True
