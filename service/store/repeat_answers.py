"""Reading and keeping the job that answers a repeated command line request.

`foldwise select` looks here before it imports scikit-learn, pandas or the store's models: a
request answered before (same answer key, service/jobs/intake/answer_key.py) is answered by that
job at once. On the embedded SQLite store the lookup uses Python's own sqlite3, opened read-only
so a missing store is never created by it; on any other store SQLAlchemy's core (no models). Any
trouble reading (no store yet, a store below the newest revision, a locked file) is a miss: the
ordinary path then runs the job and says what is wrong, if anything is.
"""

from __future__ import annotations

import json
import sqlite3
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from urllib.parse import quote

from service.store.revision import HEAD_REVISION

# the command line's jobs only (its team, service/store/models.py): an API team's job is never
# shown to a local user by this shortcut
_FIND = (
    "SELECT id, result, finished_at FROM job WHERE answer_key = :key AND status = 'succeeded' "
    "AND team = 'local' AND result IS NOT NULL ORDER BY finished_at DESC LIMIT 1"
)
_REVISION = "SELECT version_num FROM alembic_version"
_SQLITE_PREFIXES = ("sqlite:///", "sqlite+pysqlite:///")
_BUSY_SECONDS = 2.0


@dataclass(frozen=True)
class StoredAnswer:
    """The job that answered the same request, its result v1 and when it finished."""

    job_id: str
    result: dict[str, Any]
    finished_at: str


def find_answer(database_url: str, key: str) -> StoredAnswer | None:
    """The newest succeeded command line job with this answer key, or None."""
    for prefix in _SQLITE_PREFIXES:
        if database_url.startswith(prefix):
            return _find_in_sqlite(Path(database_url.removeprefix(prefix)), key)
    return _find_with_sqlalchemy(database_url, key)


def keep_answer(database_url: str, job_id: str, key: str) -> None:
    """Mark a succeeded job as the answer to requests with this key."""
    # imported here for start-up speed: only a command that just ran a job keeps its key
    from sqlalchemy import update

    from service.store.db import make_engine, make_session_factory
    from service.store.models import Job

    engine = make_engine(database_url)
    try:
        with make_session_factory(engine).begin() as session:
            session.execute(update(Job).where(Job.id == job_id).values(answer_key=key))
    finally:
        engine.dispose()


def _find_in_sqlite(path: Path, key: str) -> StoredAnswer | None:
    if not path.is_file():
        return None
    uri = f"file:{quote(str(path.resolve()))}?mode=ro"
    try:
        connection = sqlite3.connect(uri, uri=True, timeout=_BUSY_SECONDS)
    except sqlite3.Error:
        return None
    try:
        revision = connection.execute(_REVISION).fetchone()
        if revision is None or revision[0] != HEAD_REVISION:
            return None
        row = connection.execute(_FIND, {"key": key}).fetchone()
    except sqlite3.Error:
        return None
    finally:
        connection.close()
    return _answer(row)


def _find_with_sqlalchemy(database_url: str, key: str) -> StoredAnswer | None:
    # imported here for start-up speed: core only, the models are not needed to read two rows
    from sqlalchemy import create_engine, text
    from sqlalchemy.exc import SQLAlchemyError

    try:
        engine = create_engine(database_url)
    except (SQLAlchemyError, ValueError, ImportError):
        return None
    try:
        with engine.connect() as connection:
            if connection.execute(text(_REVISION)).scalar() != HEAD_REVISION:
                return None
            row = connection.execute(text(_FIND), {"key": key}).first()
    except SQLAlchemyError:
        return None
    finally:
        engine.dispose()
    return _answer(None if row is None else tuple(row))


def _answer(row: Any) -> StoredAnswer | None:
    if row is None:
        return None
    job_id, result, finished_at = row
    # SQLite keeps JSON as text; PostgreSQL's JSONB comes back already decoded
    if isinstance(result, str):
        result = json.loads(result)
    if not isinstance(result, dict):
        return None
    # stored in UTC on both stores; seconds are enough for a person to tell two runs apart
    return StoredAnswer(str(job_id), result, f"{str(finished_at)[:19]} UTC")
