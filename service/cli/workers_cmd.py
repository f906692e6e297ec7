"""`foldwise worker` and `foldwise beat`: the Celery worker and the reconcile tick, configured.

Both replace this process with `python -m celery -A workers.app ...` rather than importing the
app: `service` never imports `workers` (it names it, as it names tasks), and a fresh process
reads the BLAS thread variables set here before anything imports numpy.
"""

from __future__ import annotations

import os
import sys
from typing import Annotated, NoReturn

import typer

from service.config import load_settings

CELERY_APP = "workers.app"
# One BLAS/OpenMP thread per process: Celery concurrency already uses the cores
# (docs/reliability.md).
THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def _require_broker() -> None:
    if not os.environ.get("FOLDWISE_BROKER_URL"):
        sys.stderr.write(
            "error: FOLDWISE_BROKER_URL is not set; give the Redis URL the API publishes to "
            "(for example redis://127.0.0.1:6379/0).\n"
        )
        raise typer.Exit(2)


def _exec_celery(arguments: list[str]) -> NoReturn:
    for name in THREAD_VARIABLES:
        os.environ[name] = "1"
    command = [sys.executable, "-m", "celery", "-A", CELERY_APP, *arguments]
    sys.stdout.flush()
    sys.stderr.flush()
    # exec, not a child: signals from systemd or a supervisor reach Celery itself
    os.execv(sys.executable, command)


def worker(
    concurrency: Annotated[
        int | None, typer.Option(min=1, help="Processes running units (default: CPU count).")
    ] = None,
    name: Annotated[
        str | None, typer.Option(help="Node name, e.g. w1@%h; unique per machine.")
    ] = None,
    loglevel: Annotated[str, typer.Option(help="Celery log level.")] = "INFO",
) -> None:
    """Run a Celery worker for the unit and control queues (needs FOLDWISE_BROKER_URL)."""
    _require_broker()
    arguments = ["worker", "--loglevel", loglevel, "--pool", "prefork"]
    if concurrency is not None:
        arguments += ["--concurrency", str(concurrency)]
    if name:
        arguments += ["--hostname", name]
    # gossip and mingle sync revokes between workers; foldwise cancels through the store, and
    # skipping them makes a worker ready sooner and keeps pub/sub traffic off the broker
    arguments += ["--without-gossip", "--without-mingle"]
    _exec_celery(arguments)


def beat(
    loglevel: Annotated[str, typer.Option(help="Celery log level.")] = "INFO",
) -> None:
    """Run the schedule tick; exactly one per deployment, or every tick runs twice."""
    _require_broker()
    schedule_dir = load_settings().home / "beat"
    schedule_dir.mkdir(parents=True, exist_ok=True)
    _exec_celery(
        ["beat", "--loglevel", loglevel, "--schedule", str(schedule_dir / "celerybeat-schedule")]
    )
