"""Asking the Redis broker which messages it still holds, so a lost one is published again at once.

A Redis without persistence loses every message on a restart or a flush; the store still says
the units are queued and published. Rather than wait a fixed delay before publishing them again
(a deep, healthy queue would be doubled by it), the reconciler reads the queue itself: kombu's
Redis transport keeps waiting messages in a list named after the queue. A unit or audit the store
says is queued and published, and whose message is not in that list, was lost (a broker restart,
a flush) or was taken by a worker that died before claiming it: either way nobody will run it,
and it is published again on that tick. (A message taken by a live worker is claimed within
milliseconds; if a tick falls in between, the copy it publishes is dropped by the claim.)

Reading is a list range in bounded pages; a broker that cannot be read (another transport, or
Redis unreachable) answers None and the reconciler falls back to its delay
(FOLDWISE_REPUBLISH_AFTER).
"""

from __future__ import annotations

import base64
import json
import logging
from typing import Any

import redis

from service.dispatch import TASK_RUN_AUDIT, TASK_RUN_UNIT, UNIT_QUEUE
from service.jobs.execution.reconcile import Waiting

log = logging.getLogger(__name__)
_PAGE = 1_000


def _task_and_argument(message: Any) -> tuple[str, Any] | None:
    # a kombu message on Redis: {"headers": {"task": ...}, "body": base64 of [args, kwargs,
    # embed], "properties": {"body_encoding": "base64"}} (Celery's task message protocol 2)
    if not isinstance(message, dict):
        return None
    task = (message.get("headers") or {}).get("task")
    body = message.get("body")
    if not isinstance(task, str) or not isinstance(body, str):
        return None
    if (message.get("properties") or {}).get("body_encoding") == "base64":
        body = base64.b64decode(body).decode("utf-8")
    payload = json.loads(body)
    args = payload[0] if isinstance(payload, list) and payload else None
    if not isinstance(args, list) or not args:
        return None
    return task, args[0]


def _count(waiting: Waiting, raw: bytes | str) -> None:
    try:
        found = _task_and_argument(json.loads(raw))
    except (ValueError, TypeError, IndexError, UnicodeDecodeError):
        return  # not a message of ours: nothing to count
    if found is None:
        return
    task, argument = found
    if task == TASK_RUN_UNIT and isinstance(argument, int):
        waiting.units.add(argument)
    elif task == TASK_RUN_AUDIT and isinstance(argument, str):
        waiting.audits.add(argument)


def read_waiting(client: redis.Redis, queue: str = UNIT_QUEUE) -> Waiting:
    """Every unit and audit with a message waiting in `queue`."""
    waiting = Waiting()
    length = int(client.llen(queue))
    # pages from the head; a message popped meanwhile shifts the rest, and one message seen
    # twice or not at all only makes that unit look waiting or lost for one tick
    for start in range(0, length, _PAGE):
        for raw in client.lrange(queue, start, start + _PAGE - 1):
            _count(waiting, raw)
    return waiting


def broker_waiting(broker_url: str | None) -> Waiting | None:
    """What the broker at `broker_url` still holds; None when it cannot be read."""
    if not broker_url or not broker_url.startswith(("redis://", "rediss://", "unix://")):
        return None
    try:
        with redis.Redis.from_url(broker_url, socket_timeout=10) as client:
            return read_waiting(client)
    except redis.RedisError:
        log.warning("could not read the broker's queue; falling back to the republish delay")
        return None
