"""When an audit's message was last sent, so the reconciler can tell one never sent or lost.

Revision ID: 0011
Revises: 0008
Created: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0011"
down_revision: str | None = "0008"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    # nullable, no default: a plain ADD COLUMN on both stores; audits queued during the upgrade
    # read as never sent, and the reconciler sends them (a duplicate is skipped by the claim)
    op.add_column("audit", sa.Column("published_at", sa.DateTime(timezone=True), nullable=True))


def downgrade() -> None:
    # SQLite drops a column by rebuilding the table
    with op.batch_alter_table("audit") as batch:
        batch.drop_column("published_at")
