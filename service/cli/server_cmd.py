"""`foldwise serve`: the API process (tokens are in token_cmd)."""

from __future__ import annotations

from typing import Annotated

import typer
from sqlalchemy.engine import make_url

from service.cli.output import refuse
from service.config import Settings, load_settings
from service.errors import BadInput


def embedded_store(settings: Settings) -> bool:
    """True for the one-machine default: SQLite and no broker."""
    return settings.embedded and make_url(settings.database_url).get_backend_name() == "sqlite"


def upgrade_if_embedded(settings: Settings) -> None:
    """Migrate the embedded store in place; elsewhere that is the deploy's `foldwise db upgrade`."""
    # One process owns an embedded store, so migrating at start cannot race another server.
    if embedded_store(settings):
        from service.store.db import upgrade_database

        upgrade_database(settings.database_url)


def serve(
    host: Annotated[str, typer.Option(help="Interface to listen on.")] = "127.0.0.1",
    port: Annotated[int, typer.Option(help="TCP port to listen on.")] = 8000,
    workers_local: Annotated[
        int | None,
        typer.Option(
            "--workers-local",
            help="Local pool processes without a broker (default FOLDWISE_LOCAL_WORKERS or 2).",
        ),
    ] = None,
) -> None:
    """Run the REST API; with no broker configured, jobs run on a local process pool."""
    import uvicorn

    from service.api.app import create_app

    try:
        if workers_local is not None and workers_local < 1:
            raise BadInput("--workers-local", "must be at least 1.")
        settings = load_settings()
        app = create_app(settings, local_workers=workers_local)
    except BadInput as exc:
        refuse(exc)
    upgrade_if_embedded(settings)
    uvicorn.run(app, host=host, port=port, log_level="info")
