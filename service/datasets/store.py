"""The content-addressed dataset store: one Parquet file per content hash, kept in the SQL store.

`keep_table` writes the file into this host's datasets folder and its bytes into the store
once; `stored_frame` reads the folder's copy, fetched from the store on a miss
(service/store/host_cache.py), so a worker host needs no folder shared with the registering host.
"""

from __future__ import annotations

import os
import re
import tempfile
from collections import OrderedDict
from functools import lru_cache
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
from sqlalchemy.orm import Session

from service.config import Settings
from service.datasets.canonical import canonical_frame
from service.store.host_cache import HostCache, keep_copy, local_copy

_HASH = re.compile(r"[0-9a-f]{64}")


def table_path(content_hash: str, directory: Path) -> Path:
    """Where the table with this hash lives; refuses anything but a sha256 hex digest."""
    # The hash becomes a file name, so anything else could name a file outside `directory`.
    if not _HASH.fullmatch(content_hash):
        raise ValueError(f"{content_hash!r} is not a sha256 hex digest")
    return directory / f"{content_hash}.parquet"


def save_table(frame: pd.DataFrame, content_hash: str, directory: Path) -> Path:
    """Write `directory/<hash>.parquet` atomically unless it is already there; return its path."""
    target = table_path(content_hash, directory)
    if target.exists():
        return target
    directory.mkdir(parents=True, exist_ok=True)
    # pandas metadata in the file restores the canonical extension dtypes on read.
    table = pa.Table.from_pandas(frame, preserve_index=False)
    # A temp file in the same directory, so os.replace is atomic: readers never see half a file.
    fd, temp_name = tempfile.mkstemp(dir=directory, prefix=f".{content_hash}.", suffix=".tmp")
    os.close(fd)
    try:
        pq.write_table(table, temp_name)
        os.replace(temp_name, target)
    except BaseException:
        Path(temp_name).unlink(missing_ok=True)
        raise
    return target


def read_table(content_hash: str, directory: Path) -> pd.DataFrame:
    """Read the canonical frame stored under this hash; LookupError if it was never saved."""
    path = table_path(content_hash, directory)
    if not path.is_file():
        raise LookupError(
            f"dataset {content_hash} is not in the dataset store at {directory}; "
            "register the dataset again from its source."
        )
    # Canonicalising again is cheap and keeps the contract even for files written elsewhere.
    return canonical_frame(pq.read_table(path).to_pandas())


def keep_table(
    session: Session, frame: pd.DataFrame, content_hash: str, settings: Settings
) -> Path:
    """Save the table on this host and its bytes in the store (once per hash); return its path."""
    path = save_table(frame, content_hash, settings.dataset_dir)
    keep_copy(session, HostCache.of(settings), "table", content_hash, path)
    return path


def stored_frame(session: Session, content_hash: str, settings: Settings) -> pd.DataFrame:
    """The canonical frame under this hash, from this host's copy or else from the store.

    Raises host_cache.CopyRefused, one sentence naming the hash, when no intact copy is had.
    """
    cache = HostCache.of(settings)
    try:
        path = local_copy(session, cache, "table", content_hash)
        return canonical_frame(pq.read_table(path).to_pandas())
    except FileNotFoundError:  # evicted by another process between the two steps: once more
        path = local_copy(session, cache, "table", content_hash)
        return canonical_frame(pq.read_table(path).to_pandas())


_LOADED: OrderedDict[tuple[str, Path], pd.DataFrame] = OrderedDict()


def stored_frame_cached(session: Session, content_hash: str, settings: Settings) -> pd.DataFrame:
    """`stored_frame` with a small per-process cache; callers must treat the frame as read-only."""
    memo = (content_hash, settings.dataset_dir)
    if memo not in _LOADED:
        _LOADED[memo] = stored_frame(session, content_hash, settings)
        while len(_LOADED) > 4:
            _LOADED.popitem(last=False)
    _LOADED.move_to_end(memo)
    return _LOADED[memo]


@lru_cache(maxsize=4)
def read_table_cached(content_hash: str, directory: Path) -> pd.DataFrame:
    """`read_table` with a small per-process cache; callers must treat the frame as read-only."""
    return read_table(content_hash, directory)
