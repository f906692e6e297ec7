"""This host's copies of stored files: fetched from the store on a miss, verified, bounded.

The datasets and models folders under FOLDWISE_HOME hold copies, not the truth: every table and
final model is in the store (service/store/blobs.py), so a host with an empty folder fetches
what it needs. A copy goes in under a temporary name and is renamed into place only after its
bytes hash to the store's record, so no process on the host ever opens half a file; one lock
file per key makes concurrent fetches of one file on a host download it once. Past
`Settings.cache_bytes` the least recently used copies are deleted (their use time is the file's
mtime, touched on use), never one the store lacks, since that is the only copy.

A folder shared by several hosts still works: a copy already there that verifies is used as it
is, with no transfer.
"""

from __future__ import annotations

import contextlib
import fcntl
import hashlib
import os
import tempfile
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

from sqlalchemy.orm import Session

from service.config import Settings
from service.store import blobs

SUFFIXES = {"table": ".parquet", "model": ".skops"}
WHAT = {"table": "dataset", "model": "model"}
# a use refreshes a copy's mtime at most this often: the LRU order needs minutes, not writes
_TOUCH_EVERY = 60.0
# a temporary file this old belongs to a process that died mid-fetch
_STALE_TEMPORARY = 3600.0
# (path, inode, size) -> sha256 this process computed: a copy is hashed once per process
_VERIFIED: dict[tuple[str, int, int], str] = {}


class CopyRefused(RuntimeError):
    """A file could not be had intact from the store; the message is one sentence for people."""


@dataclass(frozen=True)
class HostCache:
    """Where this host keeps copies, and how many bytes of them at most."""

    directories: dict[str, Path]
    cap_bytes: int

    @classmethod
    def of(cls, settings: Settings) -> HostCache:
        """The datasets and models folders under FOLDWISE_HOME, capped together."""
        folders = {"table": settings.dataset_dir, "model": settings.model_dir}
        return cls(folders, settings.cache_bytes)

    def path(self, kind: str, key: str) -> Path:
        """Where the copy of (kind, key) lives on this host."""
        if len(key) != 64 or any(c not in "0123456789abcdef" for c in key):
            # the key becomes a file name: anything else could name a file elsewhere
            raise ValueError(f"{key!r} is not a sha256 hex digest")
        return self.directories[kind] / f"{key}{SUFFIXES[kind]}"


def _sha256_of(path: Path) -> str:
    status = path.stat()
    memo = (str(path), status.st_ino, status.st_size)
    if memo not in _VERIFIED:
        digest = hashlib.sha256()
        with path.open("rb") as source:
            for chunk in iter(lambda: source.read(blobs.CHUNK_BYTES), b""):
                digest.update(chunk)
        _VERIFIED[memo] = digest.hexdigest()
    return _VERIFIED[memo]


def _intact(path: Path, sha256: str) -> bool:
    try:
        return _sha256_of(path) == sha256
    except FileNotFoundError:  # evicted by another process just now
        return False


def _touch(path: Path) -> None:
    with contextlib.suppress(FileNotFoundError):
        if time.time() - path.stat().st_mtime > _TOUCH_EVERY:
            os.utime(path)


@contextlib.contextmanager
def _key_lock(directory: Path, kind: str, key: str) -> Iterator[None]:
    # one small lock file per key, kept: removing it would let a waiter lock a stale inode
    locks = directory / ".locks"
    locks.mkdir(parents=True, exist_ok=True)
    with (locks / f"{kind}-{key}.lock").open("a") as handle:
        fcntl.flock(handle, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(handle, fcntl.LOCK_UN)


def _damaged(stored: blobs.StoredFile, why: str) -> CopyRefused:
    return CopyRefused(
        f"{WHAT[stored.kind]} {stored.key}: the copy read from the store is damaged ({why}) "
        "and was not used; the store's copy must be replaced (deploy/README.md, \"No shared "
        'folder needed").'
    )


def _fetch(session: Session, stored: blobs.StoredFile, target: Path) -> None:
    target.parent.mkdir(parents=True, exist_ok=True)
    # a temporary name in the same folder, so the rename into place is atomic
    fd, temporary = tempfile.mkstemp(dir=target.parent, prefix=f".{stored.key}.", suffix=".tmp")
    try:
        digest, size = hashlib.sha256(), 0
        with os.fdopen(fd, "wb") as out:
            try:
                for chunk in blobs.read_chunks(session, stored):
                    digest.update(chunk)
                    size += len(chunk)
                    out.write(chunk)
            except blobs.StoredFileDamaged as exc:
                raise _damaged(stored, str(exc)) from None
            out.flush()
            os.fsync(out.fileno())
        if size != stored.size_bytes:
            raise _damaged(stored, f"{size} bytes arrived, {stored.size_bytes} were stored")
        if digest.hexdigest() != stored.sha256:
            raise _damaged(
                stored,
                f"its bytes hash to {digest.hexdigest()[:12]}..., "
                f"not to the recorded {stored.sha256[:12]}...",
            )
        os.replace(temporary, target)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise


def local_copy(session: Session, cache: HostCache, kind: str, key: str) -> Path:
    """The path of an intact copy of (kind, key) on this host, fetched from the store if need be.

    Raises CopyRefused (one sentence) when neither this host nor the store has it intact.
    """
    path = cache.path(kind, key)
    stored = blobs.header(session, kind, key)
    if stored is None:
        # kept before the store held files (or its registration never committed): the folder's
        # copy is all there is; a model's key is its bytes' hash, so that one can be checked
        if path.is_file() and (kind != "model" or _intact(path, key)):
            _touch(path)
            return path
        raise CopyRefused(
            f"{WHAT[kind]} {key} is neither in the store nor in {path.parent} on this host; "
            + ("register the dataset again from its source." if kind == "table" else "")
        )
    if _intact(path, stored.sha256):
        _touch(path)
        return path
    with _key_lock(path.parent, kind, key):
        # another process on this host may have fetched it while this one waited
        if not _intact(path, stored.sha256):
            _fetch(session, stored, path)
    evict(session, cache, keep=path)
    return path


def _copies(cache: HostCache) -> list[tuple[float, int, str, str, Path]]:
    found = []
    now = time.time()
    for kind, directory in cache.directories.items():
        if not directory.is_dir():
            continue
        for entry in os.scandir(directory):
            name = entry.name
            with contextlib.suppress(FileNotFoundError):
                status = entry.stat()
                if name.startswith(".") and name.endswith(".tmp"):
                    if now - status.st_mtime > _STALE_TEMPORARY:
                        Path(entry.path).unlink(missing_ok=True)
                    continue
                if entry.is_file() and name.endswith(SUFFIXES[kind]):
                    key = name[: -len(SUFFIXES[kind])]
                    found.append((status.st_mtime, status.st_size, kind, key, Path(entry.path)))
    return found


def evict(session: Session, cache: HostCache, *, keep: Path | None = None) -> list[Path]:
    """Delete least recently used copies until the folders fit the cap; return what went."""
    copies = _copies(cache)
    total = sum(size for _, size, *_ in copies)
    removed: list[Path] = []
    for _, size, kind, key, path in sorted(copies):
        if total <= cache.cap_bytes:
            break
        if path == keep or blobs.header(session, kind, key) is None:
            continue  # in use right now, or the only copy there is
        with contextlib.suppress(FileNotFoundError):
            path.unlink()
            removed.append(path)
        total -= size
    return removed


def keep_copy(session: Session, cache: HostCache, kind: str, key: str, path: Path) -> None:
    """Store a file this host just wrote (once per key), then trim the folders to the cap."""
    blobs.put_file(session, kind, key, path)
    evict(session, cache, keep=path)
