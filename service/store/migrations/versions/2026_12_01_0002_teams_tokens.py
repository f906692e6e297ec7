"""Teams and tokens: job team and request hash, dataset registrations, API tokens, publish times.

Revision ID: 0002
Revises: 0001
Created: 2026-12-01
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op
from sqlalchemy.dialects import postgresql

revision: str = "0002"
down_revision: str | None = "0001"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_JSON = sa.JSON().with_variant(postgresql.JSONB(astext_type=sa.Text()), "postgresql")


def upgrade() -> None:
    # plain ADD COLUMN (no table copy), which SQLite supports for these nullable/defaulted columns
    op.add_column("job", sa.Column("request_hash", sa.String(length=64), nullable=True))
    op.add_column(
        "job",
        sa.Column("team", sa.String(length=100), server_default="local", nullable=False),
    )
    op.create_index(op.f("ix_job_team"), "job", ["team"], unique=False)
    op.add_column("work_unit", sa.Column("published_at", sa.DateTime(timezone=True), nullable=True))
    op.create_table(
        "dataset_registration",
        sa.Column("team", sa.String(length=100), nullable=False),
        sa.Column("content_hash", sa.String(length=64), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(
            ["content_hash"],
            ["dataset.content_hash"],
            name=op.f("fk_dataset_registration_content_hash_dataset"),
        ),
        sa.PrimaryKeyConstraint("team", "content_hash", name=op.f("pk_dataset_registration")),
    )
    op.create_table(
        "api_token",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("token_hash", sa.String(length=64), nullable=False),
        sa.Column("team", sa.String(length=100), nullable=False),
        sa.Column("scopes", _JSON, nullable=False),
        sa.Column("analyst", sa.Boolean(), server_default=sa.false(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("revoked_at", sa.DateTime(timezone=True), nullable=True),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_api_token")),
        sa.UniqueConstraint("token_hash", name=op.f("uq_api_token_token_hash")),
    )


def downgrade() -> None:
    op.drop_table("api_token")
    op.drop_table("dataset_registration")
    with op.batch_alter_table("work_unit") as batch:
        batch.drop_column("published_at")
    op.drop_index(op.f("ix_job_team"), table_name="job")
    with op.batch_alter_table("job") as batch:
        batch.drop_column("team")
        batch.drop_column("request_hash")
