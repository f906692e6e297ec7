"""`foldwise token create | list | revoke`: the REST API's bearer tokens, kept as hashes only."""

from __future__ import annotations

import json
import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import TYPE_CHECKING, Annotated, Any

import typer
from rich.table import Table

from service.cli.output import fail, refuse, stderr, stdout
from service.cli.server_cmd import upgrade_if_embedded
from service.config import load_settings
from service.errors import BadInput

if TYPE_CHECKING:
    from sqlalchemy.orm import Session

token_app = typer.Typer(help="Bearer tokens for the REST API.", no_args_is_help=True)


@contextmanager
def _store() -> Iterator[Session]:
    from service.store.db import make_engine, make_session_factory

    settings = load_settings()
    upgrade_if_embedded(settings)
    engine = make_engine(settings.database_url)
    try:
        with make_session_factory(engine).begin() as session:
            yield session
    finally:
        engine.dispose()


def _run(work: Callable[[Session], Any]) -> Any:
    # imported here for start-up speed: `foldwise --help` need not load SQLAlchemy
    from sqlalchemy.exc import SQLAlchemyError

    try:
        with _store() as session:
            return work(session)
    except BadInput as exc:
        refuse(exc)
    except SQLAlchemyError as exc:
        fail(f"the store could not be used ({type(exc).__name__}); run `foldwise db upgrade`.")


@token_app.command("create")
def create(
    team: Annotated[str, typer.Option(help="The team the token acts for.")],
    scopes: Annotated[str, typer.Option(help="Comma-separated: submit, read, admin.")],
    analyst: Annotated[
        bool, typer.Option("--analyst", help="May read (never change) every team's objects.")
    ] = False,
    expires_in: Annotated[
        float | None,
        typer.Option("--expires-in", metavar="DAYS", help="Refused after this many days."),
    ] = None,
) -> None:
    """Print a new token alone on stdout; only its hash is stored, so keep it now."""
    from service.auth import SHOWN_PREFIX_LENGTH, create_token, parse_scopes

    try:
        scope_list = parse_scopes(scopes)
    except BadInput as exc:
        refuse(exc)
    token = _run(
        lambda s: create_token(
            s, team=team, scopes=scope_list, analyst=analyst, expires_in_days=expires_in
        )
    )
    sys.stdout.write(token + "\n")
    until = f", expires in {expires_in:g} days" if expires_in is not None else ""
    stderr.print(
        f"token {token[:SHOWN_PREFIX_LENGTH]}... for team {team.strip()!r} "
        f"({', '.join(scope_list)}{', analyst' if analyst else ''}{until})",
        markup=False,
    )


@token_app.command("list")
def list_(
    team: Annotated[str | None, typer.Option(help="Only this team's tokens.")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print JSON on stdout.")] = False,
) -> None:
    """Every token's id, prefix, team, scopes, analyst flag and dates (never the token)."""
    from service.tokens import list_tokens

    rows: list[dict[str, Any]] = _run(lambda s: list_tokens(s, team))
    if as_json:
        sys.stdout.write(json.dumps(rows) + "\n")
        return
    table = Table("id", "prefix", "team", "scopes", "analyst", "created", "expires", "revoked")
    for row in rows:
        table.add_row(
            str(row["id"]),
            row["prefix"] or "(older token)",
            row["team"],
            ",".join(row["scopes"]),
            "yes" if row["analyst"] else "no",
            (row["created_at"] or "")[:19],
            (row["expires_at"] or "never")[:19],
            (row["revoked_at"] or "no")[:19],
        )
    stdout.print(table)


@token_app.command("revoke")
def revoke(
    ident: Annotated[
        str, typer.Argument(metavar="ID_OR_PREFIX", help="An id or prefix from `token list`.")
    ],
) -> None:
    """Refuse the token from now on, on the API and on the report pages."""
    from service.tokens import revoke_token

    def work(session: Session) -> tuple[int, str | None, str, bool]:
        row, changed = revoke_token(session, ident)
        return row.id, row.prefix, row.team, changed

    token_id, prefix, team, changed = _run(work)
    shown = f"token {token_id} ({prefix or 'older token'}) of team {team!r}"
    stderr.print(f"{shown} {'revoked' if changed else 'was revoked already'}", markup=False)
