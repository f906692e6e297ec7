"""`foldwise demo`: the invented pump-failure scenario through the REST API of a local server.

It does what another team's service would do: start (here: spawn) a server, upload a table,
submit a job by the table's content hash, follow its progress, read the result.
"""

from __future__ import annotations

import json
import os
import socket
import sys
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Annotated, Any

import typer

from service.cli.local_server import ServerDidNotStart, free_port, serving
from service.cli.output import fail, refuse, stderr, stdout
from service.config import Settings, load_settings
from service.errors import BadInput

DEMO_DIR = Path(__file__).resolve().parents[2] / "demo_data"
TABLE = DEMO_DIR / "pump_failures.csv"
JOB = DEMO_DIR / "pump_job.json"
START_SECONDS = 60.0
# the port `foldwise demo` serves on unless told otherwise, so the printed address stays the same
DEFAULT_PORT = 8765
# A quiet line every so often when stderr is not a terminal (a CI log, a pipe).
LINE_SECONDS = 5.0


def _demo_token(settings: Settings) -> str:
    from service.auth import create_token
    from service.store.db import make_engine, make_session_factory, upgrade_database

    upgrade_database(settings.database_url)
    engine = make_engine(settings.database_url)
    try:
        with make_session_factory(engine).begin() as session:
            return create_token(session, team="demo", scopes=["submit", "read"])
    finally:
        engine.dispose()


@contextmanager
def running_server(port: int, workers: int, log_path: Path) -> Iterator[str]:
    """`foldwise serve` in a subprocess until the block ends; yields its base URL."""
    args = ("--workers-local", str(workers))
    try:
        with serving(port, log_path, start_timeout=START_SECONDS, args=args) as server:
            yield server.base_url
    except ServerDidNotStart as exc:  # only the start raises it; the demo's steps never do
        fail(str(exc))


def _checked(answer: Any, what: str) -> dict[str, Any]:
    body: dict[str, Any] = answer.json()
    if answer.status_code >= 400:
        fail(f"{what} was refused ({answer.status_code}): {body.get('detail', body)}")
    return body


def _follow(
    client: Any, location: str, update: Callable[[int, int], None] | None
) -> dict[str, Any]:
    """Poll the job until it ends, reporting progress as a bar or as occasional lines."""
    last_line, shown = 0.0, (-1, -1)
    while True:
        job = _checked(client.get(location), "reading the job")
        progress = job["progress"]
        done, total = progress["units_done"], progress["units_total"]
        if update is not None:
            update(done, total)
        elif (done, total) != shown and time.monotonic() - last_line >= LINE_SECONDS:
            stderr.print(f"  {done}/{total} units done ({job['status']})", markup=False)
            last_line, shown = time.monotonic(), (done, total)
        if job["status"] not in ("queued", "running"):
            return job
        time.sleep(0.5)


def _port_free(port: int) -> bool:
    with socket.socket() as probe:
        try:
            probe.bind(("127.0.0.1", port))
        except OSError:
            return False
        return True


def _wait_for_interrupt(base: str) -> None:
    """Keep the server up until Ctrl-C, with the pages' address and a token to sign in with."""
    stderr.print(f"Serving the report pages at {base}/reports/ until Ctrl-C.", markup=False)
    try:
        while True:
            time.sleep(3600)
    except KeyboardInterrupt:
        stderr.print("Stopping the server.", markup=False)


def demo(
    workers: Annotated[int, typer.Option(help="Local worker processes of the server.")] = min(
        2, os.cpu_count() or 1
    ),
    keep: Annotated[
        bool | None,
        typer.Option(
            "--keep/--no-keep",
            help="Keep serving the report pages until Ctrl-C (default: when stdout is a terminal).",
        ),
    ] = None,
    port: Annotated[
        int | None,
        typer.Option(help=f"Port of the server (default {DEFAULT_PORT} when keeping it)."),
    ] = None,
) -> None:
    """The invented pump-failure scenario end to end through the REST API of a local server."""
    import httpx

    from service.cli.progress import unit_progress
    from service.cli.render import print_result

    keeping = sys.stdout.isatty() if keep is None else keep
    try:
        if workers < 1:
            raise BadInput("--workers", "must be at least 1.")
        if port is not None and not 1 <= port <= 65535:
            raise BadInput("--port", "must be a TCP port between 1 and 65535.")
        # a run that stops by itself (CI, a pipe) takes any free port unless one is asked for
        chosen = port if port is not None else (DEFAULT_PORT if keeping else free_port())
        if not _port_free(chosen):
            raise BadInput(
                "--port", f"port {chosen} is already in use on 127.0.0.1; pass another --port."
            )
        settings = load_settings()
        request = json.loads(JOB.read_text(encoding="utf-8"))
    except BadInput as exc:
        refuse(exc)
    stderr.print(
        "Larkmere Water (an invented utility): which pumps fail within 30 days? Starting a "
        f"foldwise server on this machine (store in {settings.home}) ...",
        markup=False,
    )
    token = _demo_token(settings)
    with running_server(chosen, workers, settings.home / "demo-server.log") as base:
        headers = {"Authorization": f"Bearer {token}"}
        with httpx.Client(base_url=base, headers=headers, timeout=120) as client:
            with TABLE.open("rb") as table:
                files = {"file": (TABLE.name, table, "text/csv")}
                dataset = _checked(client.post("/v1/datasets/upload", files=files), "the upload")
            stderr.print(
                f"Uploaded {TABLE.name}: {dataset['n_rows']} rows, content hash "
                f"{dataset['content_hash'][:12]}; submitting the job over HTTP ...",
                markup=False,
            )
            request["dataset"] = dataset["content_hash"]
            submitted = client.post("/v1/jobs", json=request)
            job = _checked(submitted, "the job")
            with unit_progress(stderr) as update:
                job = _follow(client, submitted.headers["Location"], update)
        if job["status"] != "succeeded":
            fail(
                f"job {job['id']} ended {job['status']}: {job.get('error') or 'no error recorded'}"
            )
        print_result(stdout, job["result"], job["id"])
        _print_pages(base, job["id"], token, keeping)
        if keeping:
            _wait_for_interrupt(base)


def _print_pages(base: str, job_id: str, token: str, keeping: bool) -> None:
    """Where the report is and how to sign in to it."""
    stdout.print(f"\nReport page: {base}/reports/jobs/{job_id}", markup=False, soft_wrap=True)
    stdout.print(
        f"Sign-in token (team demo, read and submit): {token}", markup=False, soft_wrap=True
    )
    if not keeping:
        stdout.print(
            "The server stopped with the demo; `foldwise demo --keep` keeps it serving the "
            "pages, or `foldwise serve` serves this store again (the token stays valid).",
            markup=False,
        )
