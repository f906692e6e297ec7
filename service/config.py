"""One settings object, read from FOLDWISE_* environment variables."""

from __future__ import annotations

import json
import os
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import timedelta
from pathlib import Path
from typing import Any

from service.errors import BadInput

# Only drivers whose one-statement rule foldwise relies on: psycopg 3 declares a server-side
# cursor through the extended query protocol, and Python's sqlite3 runs one statement per call.
_SQL_DRIVERS = {
    "postgresql+psycopg": "postgresql+psycopg",
    "postgresql": "postgresql+psycopg",
    "sqlite": "sqlite",
    "sqlite+pysqlite": "sqlite",
}
EVERY_TEAM = "*"


@dataclass(frozen=True)
class SqlConnection:
    """A named database the operator lets sources read: its URL and the teams that may use it."""

    url: str
    # None: every team ("teams": "*"); empty: no team, only the local command line
    teams: frozenset[str] | None = frozenset()

    def usable_by(self, team: str | None) -> bool:
        """Whether `team` may read it; team None is the local command line, which holds the
        configuration itself."""
        return team is None or self.teams is None or team in self.teams


@dataclass(frozen=True)
class Settings:
    """Where foldwise keeps things and its limits; unset variables mean the embedded default."""

    home: Path
    database_url: str
    broker_url: str | None
    data_roots: tuple[Path, ...] = field(default_factory=tuple)
    max_upload_bytes: int = 200 * 1024 * 1024
    max_rows: int = 2_000_000
    max_columns: int = 2_000
    # one job's fits in all (service/cv/size.py), checked before any fold or candidate is built
    max_job_fits: int = 200_000
    # hard time limit of one unit; the soft limit and the broker's visibility timeout are derived
    # from it so that soft < hard < visibility always holds (Celery's bound on a runaway fit)
    unit_time_limit: int = 3_000
    # a claim's lease, renewed by its holder every heartbeat_seconds whatever the time limit: a
    # dead worker's unit is claimable lease_seconds after its last renewal (docs/reliability.md).
    # Four heartbeats per lease: a holder rides out a few failed renewals (a database restart)
    # before it must assume its claim is gone.
    lease_seconds: float = 40.0
    heartbeat_seconds: float = 10.0
    # the reconcile tick asks the broker which queued units it still holds and publishes the
    # lost ones at once, so a lost message waits at most one period (docs/reliability.md); the
    # delay is the fallback when the broker cannot be asked (a message older than it is sent
    # again: a copy too many is dropped by the claim)
    reconcile_seconds: float = 20.0
    republish_after: float = 300.0
    # webhooks: URL prefixes the operator allows (none: no webhooks), and the key team secrets
    # derive from (unset: the server sends no webhooks at all)
    webhook_allow: tuple[str, ...] = ()
    secret_key: str | None = None
    webhook_timeout: float = 5.0
    webhook_backoff: float = 5.0
    # SQL sources: connection name -> URL and the teams that may use it, set by the operator,
    # never by a request; and the most rows and bytes of values one source may bring in
    sql_connections: Mapping[str, SqlConnection] = field(default_factory=dict)
    sql_max_rows: int = 1_000_000
    sql_max_bytes: int = 200 * 1024 * 1024
    # the most bytes this host keeps of tables and models copied from the store (the datasets
    # and models folders together); the least recently used copies go first
    cache_bytes: int = 10 * 1024 * 1024 * 1024

    @property
    def dataset_dir(self) -> Path:
        """This host's copies of registered tables, by content hash (the store holds them all)."""
        return self.home / "datasets"

    @property
    def model_dir(self) -> Path:
        """This host's copies of final models, by sha256 (the store holds them all)."""
        return self.home / "models"

    @property
    def upload_dir(self) -> Path:
        """Where uploads are spooled while they are checked."""
        return self.home / "uploads"

    @property
    def embedded(self) -> bool:
        """True when no broker is configured: jobs run on the local process pool."""
        return self.broker_url is None

    @property
    def soft_time_limit(self) -> int:
        """Seconds after which a unit is asked to stop."""
        return max(1, int(self.unit_time_limit * 0.9))

    @property
    def unit_lease(self) -> timedelta:
        """How long a claim holds past its last renewal before another worker may take it."""
        return timedelta(seconds=self.lease_seconds)

    @property
    def visibility_timeout(self) -> int:
        """Seconds before Redis redelivers an unacknowledged message (after the hard limit)."""
        return self.unit_time_limit + 60


def _number(env: dict[str, str], name: str, default: float) -> float:
    raw = env.get(name)
    if raw is None or raw == "":
        return default
    try:
        value = float(raw)
    except ValueError:
        raise BadInput(name, f"must be a number, not {raw!r}.") from None
    if value <= 0:
        raise BadInput(name, f"must be positive, not {raw!r}.")
    return value


def _sql_url(name: str, key: str, url: Any) -> str:
    if not isinstance(url, str) or "://" not in url:
        raise BadInput(
            name, f"connection {key!r} needs a URL string such as postgresql+psycopg://..."
        )
    scheme, rest = url.split("://", 1)
    if scheme not in _SQL_DRIVERS:
        raise BadInput(
            name,
            f"connection {key!r} uses {scheme!r}; foldwise reads sql sources only from "
            "postgresql+psycopg:// or sqlite:// URLs.",
        )
    return f"{_SQL_DRIVERS[scheme]}://{rest}"


def _sql_connection(name: str, key: str, value: Any) -> SqlConnection:
    if isinstance(value, str):  # the plain form names no team: usable from the command line only
        return SqlConnection(_sql_url(name, key, value), frozenset())
    if not isinstance(value, dict) or set(value) - {"url", "teams"} or "url" not in value:
        raise BadInput(name, f'connection {key!r} must be a URL or {{"url": ..., "teams": [...]}}.')
    teams = value.get("teams", [])
    if teams == EVERY_TEAM:
        return SqlConnection(_sql_url(name, key, value["url"]), None)
    if not isinstance(teams, list) or not all(isinstance(t, str) and t.strip() for t in teams):
        raise BadInput(
            name, f'connection {key!r}: "teams" must be a list of team names, or "*" for all.'
        )
    return SqlConnection(_sql_url(name, key, value["url"]), frozenset(t.strip() for t in teams))


def _sql_connections(raw: str | None) -> dict[str, SqlConnection]:
    name = "FOLDWISE_SQL_CONNECTIONS"
    if not raw or not raw.strip():
        return {}
    text = raw
    if not raw.lstrip().startswith("{"):
        try:  # not a JSON object: the path of a file holding one (keeps passwords out of env)
            text = Path(raw).expanduser().read_text(encoding="utf-8")
        except OSError as exc:
            raise BadInput(name, f"is neither a JSON object nor a readable file ({exc}).") from None
    try:
        value = json.loads(text)
    except json.JSONDecodeError as exc:
        raise BadInput(name, f"is not valid JSON ({exc.msg}).") from None
    if not isinstance(value, dict):
        raise BadInput(name, "must be a JSON object of connection name to URL (and teams).")
    return {str(key): _sql_connection(name, str(key), item) for key, item in value.items()}


def _lease(env: dict[str, str]) -> tuple[float, float]:
    lease = _number(env, "FOLDWISE_UNIT_LEASE", 40)
    heartbeat = _number(env, "FOLDWISE_HEARTBEAT_SECONDS", 10)
    if heartbeat * 2 > lease:
        # fewer than two renewals per lease: one slow renewal would hand a live unit to another
        raise BadInput(
            "FOLDWISE_HEARTBEAT_SECONDS",
            f"must be at most half of FOLDWISE_UNIT_LEASE ({lease:g} s), not {heartbeat:g}.",
        )
    return lease, heartbeat


def load_settings(env: dict[str, str] | None = None) -> Settings:
    """Read the settings from `env` (default: the process environment)."""
    env = dict(os.environ) if env is None else env
    home = Path(env.get("FOLDWISE_HOME") or ".foldwise").expanduser().resolve()
    database_url = env.get("FOLDWISE_DATABASE_URL") or f"sqlite:///{home / 'foldwise.sqlite'}"
    roots = tuple(
        Path(p).expanduser().resolve()
        for p in (env.get("FOLDWISE_DATA_ROOTS") or "").split(os.pathsep)
        if p.strip()
    )
    lease, heartbeat = _lease(env)
    return Settings(
        home=home,
        database_url=database_url,
        broker_url=env.get("FOLDWISE_BROKER_URL") or None,
        data_roots=roots,
        max_upload_bytes=int(_number(env, "FOLDWISE_MAX_UPLOAD_MB", 200) * 1024 * 1024),
        max_rows=int(_number(env, "FOLDWISE_MAX_ROWS", 2_000_000)),
        max_columns=int(_number(env, "FOLDWISE_MAX_COLUMNS", 2_000)),
        max_job_fits=int(_number(env, "FOLDWISE_MAX_JOB_FITS", 200_000)),
        unit_time_limit=int(_number(env, "FOLDWISE_UNIT_TIME_LIMIT", 3_000)),
        lease_seconds=lease,
        heartbeat_seconds=heartbeat,
        reconcile_seconds=_number(env, "FOLDWISE_RECONCILE_SECONDS", 20),
        republish_after=_number(env, "FOLDWISE_REPUBLISH_AFTER", 300),
        webhook_allow=tuple(
            p.strip() for p in (env.get("FOLDWISE_WEBHOOK_ALLOW") or "").split(",") if p.strip()
        ),
        secret_key=env.get("FOLDWISE_SECRET_KEY") or None,
        webhook_timeout=_number(env, "FOLDWISE_WEBHOOK_TIMEOUT", 5),
        webhook_backoff=_number(env, "FOLDWISE_WEBHOOK_BACKOFF", 5),
        sql_connections=_sql_connections(env.get("FOLDWISE_SQL_CONNECTIONS")),
        sql_max_rows=int(_number(env, "FOLDWISE_SQL_MAX_ROWS", 1_000_000)),
        sql_max_bytes=int(_number(env, "FOLDWISE_SQL_MAX_MB", 200) * 1024 * 1024),
        cache_bytes=int(_number(env, "FOLDWISE_CACHE_MB", 10 * 1024) * 1024 * 1024),
    )
