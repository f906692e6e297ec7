"""A Redis database number no other running test holds, claimed for as long as it is used.

db 0 is left to people; a key there with an expiry claims a number, so concurrent test runs (and
a crashed one, once its key expires) never share a database.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

import pytest
import redis

REDIS_HOST, REDIS_PORT = "127.0.0.1", 6379
CLAIM_SECONDS = 1800


def _claim_key(number: int) -> str:
    return f"foldwise-test:redis-db:{number}"


@contextmanager
def claimed_database() -> Iterator[str]:
    """The URL of a claimed Redis database, empty before and after, released on leaving."""
    admin = redis.Redis(REDIS_HOST, REDIS_PORT, db=0)
    claimed = None
    for number in range(1, 16):
        if admin.set(_claim_key(number), "1", nx=True, ex=CLAIM_SECONDS):
            claimed = number
            break
    if claimed is None:
        admin.close()
        pytest.fail("every Redis database 1-15 is claimed by another test run")
    database = redis.Redis(REDIS_HOST, REDIS_PORT, db=claimed)
    database.flushdb()
    try:
        yield f"redis://{REDIS_HOST}:{REDIS_PORT}/{claimed}"
    finally:
        database.flushdb()
        database.close()
        admin.delete(_claim_key(claimed))
        admin.close()


def renew_claim(url: str) -> None:
    """Push the claim's expiry a full period out again.

    A module's shared stack holds its claim across all the module's tests, which together may
    outlast one period; a lapsed claim would let another run take (and flush) the database.
    """
    number = int(url.rsplit("/", 1)[1])
    with redis.Redis(REDIS_HOST, REDIS_PORT, db=0) as admin:
        assert admin.expire(_claim_key(number), CLAIM_SECONDS), f"the claim on {url} had lapsed"
