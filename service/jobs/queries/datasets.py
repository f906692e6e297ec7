"""Which team sees which stored table: registering a table for a team, and the visibility check."""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.auth import Action, Principal, authorize
from service.errors import not_visible
from service.store.models import DatasetRegistration


def register_dataset(
    session: Session, content_hash: str, team: str, *, origin: dict[str, str] | None = None
) -> None:
    """Let `team` see a stored table (idempotent), remembering where its copy came from."""
    if session.get(DatasetRegistration, (team, content_hash)) is None:
        session.add(
            DatasetRegistration(
                team=team, content_hash=content_hash, origin=dict(origin) if origin else None
            )
        )


def visible_dataset(
    session: Session, content_hash: str, principal: Principal, action: Action = Action.READ
) -> None:
    """Raise NotFound unless the matrix lets the principal act on the table."""
    query = select(DatasetRegistration.team).where(DatasetRegistration.content_hash == content_hash)
    teams = set(session.scalars(query))
    if not teams:
        raise not_visible("dataset", content_hash)
    authorize(principal, action, teams, what="dataset", ident=content_hash)
