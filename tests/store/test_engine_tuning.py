"""Engine options that differ between the API and the workers."""

from __future__ import annotations

from sqlalchemy import text

from service.store.db import make_engine


def test_relaxed_commits_only_where_asked(postgresql_url: str) -> None:
    # workers opt out of waiting for the WAL flush; the API's default engine keeps waiting
    relaxed = make_engine(postgresql_url, durable_commits=False)
    durable = make_engine(postgresql_url)
    try:
        with relaxed.connect() as connection:
            assert connection.execute(text("SHOW synchronous_commit")).scalar() == "off"
        with durable.connect() as connection:
            assert connection.execute(text("SHOW synchronous_commit")).scalar() == "on"
    finally:
        relaxed.dispose()
        durable.dispose()
