"""Tables and final models kept in the store by hash, in chunks, so hosts need no shared folder.

Revision ID: 0008
Revises: 0007
Created: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0008"
down_revision: str | None = "0007"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "blob",
        sa.Column("kind", sa.String(length=16), nullable=False),
        sa.Column("key", sa.String(length=64), nullable=False),
        sa.Column("sha256", sa.String(length=64), nullable=False),
        sa.Column("size_bytes", sa.BigInteger(), nullable=False),
        sa.Column("chunks", sa.Integer(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint("kind IN ('table', 'model')", name=op.f("ck_blob_kind")),
        sa.PrimaryKeyConstraint("kind", "key", name=op.f("pk_blob")),
    )
    op.create_table(
        "blob_chunk",
        sa.Column("kind", sa.String(length=16), nullable=False),
        sa.Column("key", sa.String(length=64), nullable=False),
        sa.Column("seq", sa.Integer(), nullable=False),
        sa.Column("data", sa.LargeBinary(), nullable=False),
        sa.ForeignKeyConstraint(
            ["kind", "key"],
            ["blob.kind", "blob.key"],
            name=op.f("fk_blob_chunk_kind_blob"),
            ondelete="CASCADE",
        ),
        sa.PrimaryKeyConstraint("kind", "key", "seq", name=op.f("pk_blob_chunk")),
    )
    if op.get_bind().dialect.name == "postgresql":
        # Parquet and skops files are compressed already: storing chunks out of line without
        # another compression pass saves the server CPU on every write and read
        op.execute("ALTER TABLE blob_chunk ALTER COLUMN data SET STORAGE EXTERNAL")


def downgrade() -> None:
    op.drop_table("blob_chunk")
    op.drop_table("blob")
