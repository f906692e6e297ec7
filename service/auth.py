"""Bearer tokens: kept as sha256 only, each with a team and scopes, analysts read across teams."""

from __future__ import annotations

import hashlib
import secrets
from dataclasses import dataclass

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.errors import BadInput
from service.store.models import ApiToken

SCOPES = ("submit", "read", "admin")
TOKEN_PREFIX = "fw_"


@dataclass(frozen=True)
class Principal:
    """Who is asking: a team, what it may do, and whether it may read other teams' work."""

    team: str
    scopes: frozenset[str]
    analyst: bool = False

    def may_see(self, team: str) -> bool:
        """Whether this principal may read an object owned by `team`."""
        return self.analyst or team == self.team


def hash_token(token: str) -> str:
    """The stored form of a token."""
    return hashlib.sha256(token.encode()).hexdigest()


def parse_scopes(text: str) -> list[str]:
    """'submit,read' -> ['submit', 'read'], refusing unknown scopes."""
    scopes = [s.strip() for s in text.split(",") if s.strip()]
    unknown = sorted(set(scopes) - set(SCOPES))
    if not scopes or unknown:
        raise BadInput("--scopes", f"scopes must be among {', '.join(SCOPES)} (got {text!r}).")
    return list(dict.fromkeys(scopes))


def create_token(session: Session, *, team: str, scopes: list[str], analyst: bool = False) -> str:
    """Store a new token for `team` and return it; this is the only time it is seen."""
    if not team.strip() or len(team) > 100:
        raise BadInput("--team", "give a team name of 1 to 100 characters.")
    token = TOKEN_PREFIX + secrets.token_urlsafe(32)
    session.add(
        ApiToken(token_hash=hash_token(token), team=team.strip(), scopes=scopes, analyst=analyst)
    )
    return token


def authenticate(session: Session, token: str) -> Principal | None:
    """The principal of a valid, unrevoked token, else None."""
    row = session.scalars(
        select(ApiToken).where(
            ApiToken.token_hash == hash_token(token), ApiToken.revoked_at.is_(None)
        )
    ).one_or_none()
    if row is None:
        return None
    return Principal(row.team, frozenset(row.scopes), bool(row.analyst))
