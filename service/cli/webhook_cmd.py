"""`foldwise webhook-secret --team T`: the key a team's receivers verify signatures with."""

from __future__ import annotations

import sys
from typing import Annotated

import typer

from service.config import load_settings
from service.notify.signing import team_secret


def webhook_secret(
    team: Annotated[str, typer.Option("--team", help="The team whose secret to print.")],
) -> None:
    """Print a team's webhook secret, alone on stdout (derived from FOLDWISE_SECRET_KEY)."""
    settings = load_settings()
    if settings.secret_key is None:
        sys.stderr.write(
            "error: FOLDWISE_SECRET_KEY: is not set, so this server signs and sends no webhooks; "
            "set it (the same value on every server process) first.\n"
        )
        raise typer.Exit(2)
    if not team.strip():
        sys.stderr.write("error: --team: give a team name.\n")
        raise typer.Exit(2)
    sys.stdout.write(team_secret(settings.secret_key, team.strip()) + "\n")
