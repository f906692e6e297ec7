"""Tables for files kept in the store itself: tables and final models, by hash, in chunks.

A worker host needs only the database and broker addresses: what it cannot find on its own disk
it reads from here (service/store/host_cache.py). A file is cut into rows of at most
`blob.CHUNK_BYTES` so no statement carries a whole table, and its header holds the sha256 and
size of the bytes, so a copy that arrives short or changed is refused.
"""

from __future__ import annotations

from sqlalchemy import BigInteger, CheckConstraint, ForeignKeyConstraint, Integer, LargeBinary
from sqlalchemy.orm import Mapped, mapped_column

from service.store.models import Base, one_of
from service.store.types import CreatedAt, Hash64, Short

# "table": a dataset's Parquet copy, keyed by the dataset's content hash (of its canonical form,
# not of these bytes); "model": a final model's skops file, keyed by the sha256 of its bytes
BLOB_KINDS = ("table", "model")


class Blob(Base):
    """One stored file: what it is, the sha256 and size of its bytes, how many chunks."""

    __tablename__ = "blob"
    __table_args__ = (CheckConstraint(one_of("kind", BLOB_KINDS), name="kind"),)

    kind: Mapped[Short] = mapped_column(primary_key=True)
    key: Mapped[Hash64] = mapped_column(primary_key=True)
    sha256: Mapped[Hash64]
    size_bytes: Mapped[int] = mapped_column(BigInteger)
    chunks: Mapped[int] = mapped_column(Integer)
    created_at: Mapped[CreatedAt]


class BlobChunk(Base):
    """Bytes `seq * chunk size` onwards of a stored file."""

    __tablename__ = "blob_chunk"
    __table_args__ = (
        ForeignKeyConstraint(["kind", "key"], ["blob.kind", "blob.key"], ondelete="CASCADE"),
    )

    kind: Mapped[Short] = mapped_column(primary_key=True)
    key: Mapped[Hash64] = mapped_column(primary_key=True)
    seq: Mapped[int] = mapped_column(Integer, primary_key=True)
    data: Mapped[bytes] = mapped_column(LargeBinary)
