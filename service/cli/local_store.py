"""Reading jobs that `foldwise select` kept in this machine's store (FOLDWISE_HOME)."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from service.cli.client import config_path
from service.config import load_settings
from service.errors import BadInput
from service.store.db import make_engine, make_session_factory
from service.store.models import Job

_SQLITE = "sqlite:///"


def server_configured() -> bool:
    """Whether a server is named (FOLDWISE_URL or the client.json of `foldwise login`)."""
    return bool(os.environ.get("FOLDWISE_URL")) or config_path().is_file()


def local_job(job_id: str) -> dict[str, Any]:
    """The job as the REST API shows it (id, kind, status, error, result), from the local store."""
    settings = load_settings()
    url = settings.database_url
    if url.startswith(_SQLITE) and not Path(url.removeprefix(_SQLITE)).is_file():
        raise BadInput(
            "JOB",
            f"there is no local store at {url.removeprefix(_SQLITE)}; run `foldwise select` "
            "here first, or name a server with `foldwise login`.",
        )
    engine = make_engine(url)
    try:
        with make_session_factory(engine)() as session:
            job = session.get(Job, job_id)
            if job is None:
                raise BadInput("JOB", f"no job {job_id} in the local store ({url}).")
            return {
                "id": job.id,
                "kind": job.kind,
                "status": job.status,
                "error": job.error,
                "result": job.result,
            }
    finally:
        engine.dispose()
