"""One settings object, read from FOLDWISE_* environment variables."""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path


@dataclass(frozen=True)
class Settings:
    """Where foldwise keeps things; unset variables mean the embedded default under `home`."""

    home: Path
    database_url: str
    broker_url: str | None
    data_roots: tuple[Path, ...] = field(default_factory=tuple)

    @property
    def dataset_dir(self) -> Path:
        """Content-addressed copies of every registered table (what workers load by hash)."""
        return self.home / "datasets"

    @property
    def model_dir(self) -> Path:
        """Final picks, refit on all rows, stored by their sha256."""
        return self.home / "models"

    @property
    def embedded(self) -> bool:
        """True when no broker is configured: jobs run on the local process pool."""
        return self.broker_url is None


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
    return Settings(
        home=home,
        database_url=database_url,
        broker_url=env.get("FOLDWISE_BROKER_URL") or None,
        data_roots=roots,
    )
