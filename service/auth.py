"""Bearer tokens and the one place that decides who may do what to whose objects.

Tokens are kept as sha256 only, each with a team, scopes, an analyst flag, an optional expiry and
a revocation time. `authorize` applies the scope matrix (README "Who may do what"): the scope an
action needs is checked first, without looking at any object (403); then the object's team, and
an object the caller may not act on is reported exactly like a missing one (404).
"""

from __future__ import annotations

import hashlib
import secrets
from collections.abc import Iterable
from dataclasses import dataclass
from datetime import datetime, timedelta
from enum import StrEnum

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.errors import BadInput, MissingScope, not_visible
from service.store.db import utcnow
from service.store.models import ApiToken

SCOPES = ("submit", "read", "admin")
TOKEN_PREFIX = "fw_"
# what `token list` shows of a token: "fw_" and the first characters of its random part
SHOWN_PREFIX_LENGTH = len(TOKEN_PREFIX) + 8
MAX_EXPIRY_DAYS = 3650


class Action(StrEnum):
    """What a caller asks to do to an object."""

    READ = "read"  # get, list, export, compare, provenance, report pages
    SUBMIT = "submit"  # submit a job, register or upload a table (always for the caller's team)
    CANCEL = "cancel"
    AUDIT = "audit"  # starts recomputation, so it is work done for the job's team
    SCHEDULE = "schedule"  # create a schedule, refresh one now


@dataclass(frozen=True)
class Rule:
    """One row of the matrix: the scope an action needs, and whether analysts may do it to
    other teams' objects."""

    scope: str
    analysts_across_teams: bool


MATRIX: dict[Action, Rule] = {
    Action.READ: Rule("read", analysts_across_teams=True),
    Action.SUBMIT: Rule("submit", analysts_across_teams=False),
    Action.CANCEL: Rule("submit", analysts_across_teams=False),
    Action.AUDIT: Rule("submit", analysts_across_teams=False),
    Action.SCHEDULE: Rule("submit", analysts_across_teams=False),
}


@dataclass(frozen=True)
class Principal:
    """Who is asking: a team, what it may do, and whether it may read other teams' work."""

    team: str
    scopes: frozenset[str]
    analyst: bool = False


def has_scope(principal: Principal, action: Action) -> bool:
    """Whether the token's scopes allow the action at all (admin holds every scope)."""
    return MATRIX[action].scope in principal.scopes or "admin" in principal.scopes


def reaches_every_team(principal: Principal, action: Action) -> bool:
    """Whether the action is open to the principal on every team's objects (listings use it)."""
    return principal.analyst and MATRIX[action].analysts_across_teams


def permits(principal: Principal, action: Action, owners: str | Iterable[str] | None) -> bool:
    """The matrix as a yes/no: `owners` is the object's team (or teams; None: the caller's own)."""
    if not has_scope(principal, action):
        return False
    if owners is None or reaches_every_team(principal, action):
        return True
    teams = {owners} if isinstance(owners, str) else set(owners)
    return principal.team in teams


def authorize(
    principal: Principal,
    action: Action,
    owners: str | Iterable[str] | None = None,
    *,
    what: str = "object",
    ident: object = None,
) -> None:
    """Raise MissingScope (403) or NotFound (404, worded as for a missing object) unless allowed."""
    if not has_scope(principal, action):
        raise MissingScope(MATRIX[action].scope, principal.scopes)
    if not permits(principal, action, owners):
        raise not_visible(what, ident)


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


def create_token(
    session: Session,
    *,
    team: str,
    scopes: list[str],
    analyst: bool = False,
    expires_in_days: float | None = None,
) -> str:
    """Store a new token for `team` and return it; this is the only time it is seen."""
    if not team.strip() or len(team) > 100:
        raise BadInput("--team", "give a team name of 1 to 100 characters.")
    expires_at = None
    if expires_in_days is not None:
        if not 0 < expires_in_days <= MAX_EXPIRY_DAYS:
            raise BadInput(
                "--expires-in", f"give a number of days above 0 and at most {MAX_EXPIRY_DAYS}."
            )
        expires_at = utcnow() + timedelta(days=expires_in_days)
    token = TOKEN_PREFIX + secrets.token_urlsafe(32)
    session.add(
        ApiToken(
            token_hash=hash_token(token),
            prefix=token[:SHOWN_PREFIX_LENGTH],
            team=team.strip(),
            scopes=scopes,
            analyst=analyst,
            expires_at=expires_at,
        )
    )
    session.flush()
    return token


def is_live(row: ApiToken, now: datetime | None = None) -> bool:
    """Neither revoked nor past its expiry."""
    now = now or utcnow()
    return row.revoked_at is None and (row.expires_at is None or row.expires_at > now)


def principal_of(row: ApiToken) -> Principal:
    """The principal a stored token acts as."""
    return Principal(row.team, frozenset(row.scopes), bool(row.analyst))


def live_token(session: Session, token: str) -> ApiToken | None:
    """The stored row of a token that is known, unrevoked and unexpired, else None."""
    row = session.scalars(
        select(ApiToken).where(ApiToken.token_hash == hash_token(token.strip()))
    ).one_or_none()
    return row if row is not None and is_live(row) else None


def authenticate(session: Session, token: str) -> Principal | None:
    """The principal of a valid, unrevoked, unexpired token, else None."""
    row = live_token(session, token)
    return principal_of(row) if row is not None else None
