"""A token per claim on work_unit: renewals and the final record are fenced on it.

Revision ID: 0007
Revises: 0006
Created: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0007"
down_revision: str | None = "0006"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    # nullable, no default: a plain ADD COLUMN on both stores, no table rebuild; units running
    # during the upgrade have no token and are taken again once their lease passes
    op.add_column("work_unit", sa.Column("claim_token", sa.String(length=32), nullable=True))


def downgrade() -> None:
    # SQLite drops a column by rebuilding the table
    with op.batch_alter_table("work_unit") as batch:
        batch.drop_column("claim_token")
