"""The Celery app the workers run (`foldwise worker`) and beat publishes with (workers/ticks.py)."""

from __future__ import annotations

import importlib
from typing import Any

from celery import Celery
from celery.signals import worker_init, worker_process_init
from kombu import Exchange, Queue

from service.config import Settings, load_settings
from service.dispatch import UNIT_QUEUE
from service.dispatch.celery_client import celery_options
from workers import state
from workers.threads import cap_loaded_threadpools

MAX_TASKS_PER_CHILD = 200
MAX_MEMORY_PER_CHILD_KIB = 2 * 1024 * 1024  # a child past 2 GiB is replaced after its task


def _queue(name: str) -> Queue:
    return Queue(name, Exchange(name, type="direct"), routing_key=name)


def worker_options(settings: Settings) -> dict[str, Any]:
    """What a worker adds to the publisher's options (celery_options)."""
    # soft < hard < visibility timeout, derived from settings.unit_time_limit: the hard limit
    # bounds a runaway fit and ends it before Redis would hand its message to a twin
    # (celery#5935); the visibility timeout itself is in broker_transport_options. The claim's
    # lease is separate and short: its holder renews it (service/jobs/execution/heartbeat.py),
    # so a redelivered copy finds it live and is dropped by the claim.
    assert settings.soft_time_limit < settings.unit_time_limit < settings.visibility_timeout
    assert 2 * settings.heartbeat_seconds <= settings.lease_seconds
    return {
        # one queue on its own direct exchange; the ticks are not tasks (workers/ticks.py)
        "task_queues": [_queue(UNIT_QUEUE)],
        # a message is acknowledged only after its unit ran, and a worker holds one message at a
        # time, so a dead worker strands one unit and not a prefetched batch
        "task_acks_late": True,
        "worker_prefetch_multiplier": 1,
        # a child killed mid-unit (OOM, SIGKILL) requeues its message instead of acknowledging
        # it; safe only because the claim caps attempts (MAX_ATTEMPTS), or a unit that kills its
        # process would loop forever
        "task_reject_on_worker_lost": True,
        # after a broker connection loss the message can no longer be acknowledged and will be
        # delivered again: stop the running copy rather than keep two (celery PR #6654)
        "worker_cancel_long_running_tasks_on_connection_loss": True,
        "task_time_limit": settings.unit_time_limit,
        "task_soft_time_limit": settings.soft_time_limit,
        # bound the growth of long-lived children (fitted models, allocator fragmentation)
        "worker_max_tasks_per_child": MAX_TASKS_PER_CHILD,
        "worker_max_memory_per_child": MAX_MEMORY_PER_CHILD_KIB,
        # no chords, no results, no events: the store holds the state
        "worker_send_task_events": False,
    }


def make_celery(settings: Settings) -> Celery:
    """A Celery app for workers and beat, configured from `settings`."""
    if not settings.broker_url:
        raise ValueError("a Celery app needs FOLDWISE_BROKER_URL")
    app = Celery("foldwise", include=["workers.tasks"])
    app.conf.update(celery_options(settings))
    app.conf.update(worker_options(settings))
    return app


_thread_limits: list[Any] = []  # held for the life of the process
# What a unit's first run in a fresh process would otherwise import, seconds of it on a busy
# machine: the estimator families and the model file's format (skops imports every estimator
# for its trusted types, and the CLI imports it late on purpose). Imported once in the worker's
# main process before its pool forks, so every child starts warm (as the local pool's fork
# server preloads the same).
WARM_MODULES = (
    "sklearn.ensemble",
    "sklearn.linear_model",
    "sklearn.svm",
    "sklearn.neighbors",
    "sklearn.model_selection",
    "skops.io",
)


@worker_init.connect
def _warm_before_fork(**_: Any) -> None:
    for name in WARM_MODULES:
        importlib.import_module(name)


@worker_process_init.connect
def _child_started(**_: Any) -> None:
    # every prefork child: its own connection pool, one BLAS/OpenMP thread (docs/reliability.md)
    state.after_fork()
    _thread_limits.append(cap_loaded_threadpools())


def _module_app() -> Celery:
    settings = load_settings()
    if not settings.broker_url:
        # importing for lint or docs without a broker must not fail; a worker refuses to start
        # on its own (foldwise worker checks first, celery cannot connect to "unset://")
        return Celery("foldwise", include=["workers.tasks"])
    return make_celery(settings)


app = _module_app()
