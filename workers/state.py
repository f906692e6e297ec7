"""Per-process store handles for the tasks, made lazily and dropped after a fork."""

from __future__ import annotations

from sqlalchemy import Engine
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings, load_settings
from service.store.db import dispose_after_fork, make_engine, make_session_factory

_engine: Engine | None = None
_sessions: sessionmaker[Session] | None = None
_settings: Settings | None = None


def settings() -> Settings:
    """The settings this process was started with."""
    global _settings
    if _settings is None:
        _settings = load_settings()
    return _settings


def sessions() -> sessionmaker[Session]:
    """A session factory on this process's own engine."""
    global _engine, _sessions
    if _sessions is None:
        # a worker's commits need not wait for the disk: see make_engine on what a crash costs
        _engine = make_engine(settings().database_url, durable_commits=False)
        _sessions = make_session_factory(_engine)
    return _sessions


def after_fork() -> None:
    """Forget the parent's pool: sockets shared across a fork corrupt both sides' sessions."""
    # SQLAlchemy pooling docs, "Using Connection Pools with Multiprocessing or os.fork()":
    # close=False leaves the parent's connections alone, the child opens its own on first use.
    if _engine is not None:
        dispose_after_fork(_engine)
