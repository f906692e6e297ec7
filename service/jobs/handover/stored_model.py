"""A job's final model file on this host, read through the store like a table.

The model route, the model card and the report page ask here, so an API host that never saw the
worker's disk serves the very bytes the refit stored (service/store/host_cache.py).
"""

from __future__ import annotations

from pathlib import Path

from sqlalchemy.orm import Session

from service.config import Settings
from service.jobs.handover.model_file import SUFFIX, file_sha256
from service.store.host_cache import CopyRefused, HostCache, local_copy
from service.store.models import FinalModel


def model_path(session: Session, model: FinalModel, settings: Settings) -> Path:
    """An intact copy of `model`'s file here; CopyRefused (one sentence) when none can be had."""
    try:
        return local_copy(session, HostCache.of(settings), "model", model.sha256)
    except CopyRefused:
        # a model saved before the store held files, at a path this host can still read
        old = Path(model.path)
        if old.suffix == SUFFIX and old.is_file() and file_sha256(old) == model.sha256:
            return old
        raise
