"""Reading the unit queue in a real Redis: what the reconciler asks before publishing again.

Messages are sent by Celery itself (the publisher's own options), so the test reads the format
kombu writes, not one we made up; a flush, as a Redis restart without persistence does, leaves
nothing to find.
"""

from __future__ import annotations

import redis
from celery import Celery

from service.config import load_settings
from service.dispatch import TASK_RUN_AUDIT, TASK_RUN_UNIT, TASK_RUN_UNITS, UNIT_QUEUE
from service.dispatch.broker_queue import broker_waiting, read_waiting
from service.dispatch.celery_client import celery_options


def test_the_reconciler_sees_which_messages_the_broker_still_holds(redis_url: str) -> None:
    settings = load_settings({"FOLDWISE_BROKER_URL": redis_url, "FOLDWISE_HOME": "/nonexistent"})
    app = Celery("foldwise-test-publisher")
    app.conf.update(celery_options(settings))
    try:
        for unit_id in (3, 5, 8):
            app.send_task(TASK_RUN_UNIT, args=[unit_id], queue=UNIT_QUEUE)
        app.send_task(TASK_RUN_AUDIT, args=["a1b2"], queue=UNIT_QUEUE)
        # a batch's one message names every unit it carries (service/jobs/execution/batches.py)
        app.send_task(TASK_RUN_UNITS, args=[[13, 21]], queue=UNIT_QUEUE)
    finally:
        app.close()
    waiting = broker_waiting(redis_url)
    assert waiting is not None
    assert (waiting.units, waiting.audits) == ({3, 5, 8, 13, 21}, {"a1b2"})

    with redis.Redis.from_url(redis_url) as client:
        # a worker takes one message off the list (kombu pops from the tail: the oldest)
        client.rpop(UNIT_QUEUE)
        assert read_waiting(client).units == {5, 8, 13, 21}
        client.flushdb()  # what a restart of a Redis without persistence does
        assert read_waiting(client).units == set() and read_waiting(client).audits == set()


def test_a_broker_that_cannot_be_read_answers_none() -> None:
    # nothing listens on port 1: the reconciler falls back to FOLDWISE_REPUBLISH_AFTER
    assert broker_waiting("redis://127.0.0.1:1/0") is None
    assert broker_waiting("amqp://guest@127.0.0.1//") is None
    assert broker_waiting(None) is None
