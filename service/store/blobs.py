"""Files kept in the store by hash: written once in bounded chunks, read back chunk by chunk.

Neither side ever holds more than one chunk in a statement or in memory, so a table of any size
travels through PostgreSQL or SQLite without one giant parameter. Writes are idempotent by key:
a second writer of the same file stores nothing (the header's key decides).
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

from sqlalchemy import insert, select
from sqlalchemy.orm import Session

from service.store.blob_models import Blob, BlobChunk
from service.store.db import insert_ignoring_duplicates

# 2 MiB per row: few round trips for a table of a few hundred MB, and small enough that a
# worker's memory and PostgreSQL's per-value handling stay trivial
CHUNK_BYTES = 2 * 1024 * 1024


@dataclass(frozen=True)
class StoredFile:
    """A file's header: what it is, and the sha256 and size its bytes must have."""

    kind: str
    key: str
    sha256: str
    size_bytes: int
    chunks: int


class StoredFileDamaged(RuntimeError):
    """The bytes read back do not match the header; the message is one sentence for people."""


def header(session: Session, kind: str, key: str) -> StoredFile | None:
    """The stored file's header, or None when the store does not hold it."""
    row = session.get(Blob, (kind, key))
    if row is None:
        return None
    return StoredFile(row.kind, row.key, row.sha256, row.size_bytes, row.chunks)


def _file_digest(path: Path) -> tuple[str, int]:
    digest, size = hashlib.sha256(), 0
    with path.open("rb") as source:
        for chunk in iter(lambda: source.read(CHUNK_BYTES), b""):
            digest.update(chunk)
            size += len(chunk)
    return digest.hexdigest(), size


def _add_header(session: Session, kind: str, key: str, sha256: str, size: int) -> bool:
    chunks = -(-size // CHUNK_BYTES)  # ceiling: an empty file has no chunk
    row = {"kind": kind, "key": key, "sha256": sha256, "size_bytes": size, "chunks": chunks}
    # On PostgreSQL a concurrent writer of the same key waits here for the other transaction
    # and then inserts nothing: exactly one copy of the chunks goes in.
    return insert_ignoring_duplicates(session, Blob, [row]) == 1


def put_file(session: Session, kind: str, key: str, path: Path) -> bool:
    """Store the file at `path` under (kind, key) unless it is there; True if written now."""
    if header(session, kind, key) is not None:
        return False
    # two passes over the file (hash, then chunks) keep memory at one chunk whatever its size
    sha256, size = _file_digest(path)
    if not _add_header(session, kind, key, sha256, size):
        return False
    digest = hashlib.sha256()
    with path.open("rb") as source:
        for seq, chunk in enumerate(iter(lambda: source.read(CHUNK_BYTES), b"")):
            digest.update(chunk)
            session.execute(insert(BlobChunk).values(kind=kind, key=key, seq=seq, data=chunk))
    if digest.hexdigest() != sha256:  # the file changed under us: store nothing (rolls back)
        raise RuntimeError(f"{path} changed while it was being stored; nothing was stored.")
    return True


def put_bytes(session: Session, kind: str, key: str, data: bytes) -> bool:
    """Store `data` under (kind, key) unless it is there; True if written now."""
    if header(session, kind, key) is not None:
        return False
    if not _add_header(session, kind, key, hashlib.sha256(data).hexdigest(), len(data)):
        return False
    view = memoryview(data)
    for seq, start in enumerate(range(0, len(data), CHUNK_BYTES)):
        chunk = bytes(view[start : start + CHUNK_BYTES])
        session.execute(insert(BlobChunk).values(kind=kind, key=key, seq=seq, data=chunk))
    return True


def read_chunks(session: Session, stored: StoredFile) -> Iterator[bytes]:
    """The file's chunks in order, one statement each; a missing chunk is StoredFileDamaged."""
    for seq in range(stored.chunks):
        data = session.scalar(
            select(BlobChunk.data).where(
                BlobChunk.kind == stored.kind, BlobChunk.key == stored.key, BlobChunk.seq == seq
            )
        )
        if data is None:
            raise StoredFileDamaged(
                f"chunk {seq} of {stored.chunks} is missing from the store's copy"
            )
        yield bytes(data)
