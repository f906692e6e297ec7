"""`foldwise serve`: the API process (tokens are in token_cmd)."""

from __future__ import annotations

import os
import threading
from types import FrameType
from typing import TYPE_CHECKING, Annotated

import typer

from service.cli.output import refuse, stderr
from service.config import Settings, load_settings
from service.errors import BadInput

if TYPE_CHECKING:
    import uvicorn

# After SIGTERM (or Ctrl-C) requests in flight get REQUEST_GRACE seconds to finish before
# uvicorn cancels them; then the lifespan stops the local pool's processes (2 s each to go,
# then killed) and hands their units back. A request thread that cannot be cancelled (a long
# computation) must not keep the process alive: at EXIT_DEADLINE the process exits regardless,
# and the pool's processes die with it. STOP_GRACE is the bound the deploy guide states.
REQUEST_GRACE = 10
EXIT_DEADLINE = 15
STOP_GRACE = 20
# An idle keep-alive connection is closed by the client or proxy first, never by us: when both
# ends use the same idle timeout (uvicorn's and httpx's are both 5 s) the server may close a
# connection in the instant the client sends a request on it, and that request fails with a
# reset. 75 s outlasts httpx's 5 s and a load balancer's usual 60 s (AWS's default, from memory).
KEEP_ALIVE_SECONDS = 75


def embedded_store(settings: Settings) -> bool:
    """True for the one-machine default: SQLite and no broker."""
    # imported here for start-up speed: `foldwise --help` need not load SQLAlchemy
    from sqlalchemy.engine import make_url

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
    config = uvicorn.Config(
        app,
        host=host,
        port=port,
        log_level="info",
        timeout_keep_alive=KEEP_ALIVE_SECONDS,
        timeout_graceful_shutdown=REQUEST_GRACE,
    )
    server_class = _bounded_shutdown(uvicorn.Server)
    server_class(config).run()


def _exit_now() -> None:
    stderr.print(
        f"foldwise serve: still running {EXIT_DEADLINE} s after the stop signal; exiting now",
        markup=False,
    )
    os._exit(1)  # no interpreter shutdown: it would wait for the stuck request thread


def _bounded_shutdown(base: type[uvicorn.Server]) -> type[uvicorn.Server]:
    """uvicorn's server class, with a deadline on the whole shutdown."""

    class BoundedShutdown(base):  # type: ignore[valid-type,misc]
        """Starts the shutdown watchdog on the first stop signal."""

        def handle_exit(self, sig: int, frame: FrameType | None) -> None:
            if not self.should_exit:
                watchdog = threading.Timer(EXIT_DEADLINE, _exit_now)
                watchdog.daemon = True
                watchdog.start()
            super().handle_exit(sig, frame)

    return BoundedShutdown
