"""`foldwise worker` and `foldwise beat`: the Celery worker, and the process running the ticks.

Both replace this process (`python -m celery -A workers.app worker ...`, `python -m
workers.ticks`) rather than importing them: `service` never imports `workers` (it names it, as
it names tasks), and a fresh process reads the BLAS thread variables set here before anything
imports numpy.
"""

from __future__ import annotations

import os
import sys
from typing import Annotated, NoReturn

import typer

CELERY_APP = "workers.app"
BEAT_MODULE = "workers.ticks"
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
    _exec_python(["-m", "celery", "-A", CELERY_APP, *arguments])


def _exec_python(arguments: list[str]) -> NoReturn:
    for name in THREAD_VARIABLES:
        os.environ[name] = "1"
    command = [sys.executable, *arguments]
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
    loglevel: Annotated[str, typer.Option(help="Log level.")] = "INFO",
) -> None:
    """Run the reconcile, schedule and webhook ticks; one per deployment (two only waste work)."""
    _require_broker()
    # its own process, not a Celery beat sending tasks: the ticks must not wait for a pool
    # process busy with a fit (workers/ticks.py)
    _exec_python(["-m", BEAT_MODULE, "--loglevel", loglevel])
