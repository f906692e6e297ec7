"""A schedule setting: does `degraded` judge the estimate or its interval's better bound.

Revision ID: 0009
Revises: 0008
Created: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0009"
down_revision: str | None = "0008"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    # a constant server default: a plain ADD COLUMN on both stores, and every existing schedule
    # keeps judging the estimate, as it did before the setting existed
    op.add_column(
        "schedule",
        sa.Column("degraded_on", sa.String(length=16), server_default="estimate", nullable=False),
    )


def downgrade() -> None:
    # SQLite drops a column by rebuilding the table
    with op.batch_alter_table("schedule") as batch:
        batch.drop_column("degraded_on")
