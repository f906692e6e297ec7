"""A job's answer key: the same command line request on the same bytes is answered by it.

Revision ID: 0014
Revises: 0013
Created: 2026-12-04
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0014"
down_revision: str | None = "0013"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    # nullable, no default: a plain ADD COLUMN on both stores; jobs from before have no key, so
    # their requests are run again once and keyed then
    op.add_column("job", sa.Column("answer_key", sa.String(64), nullable=True))
    op.create_index("ix_job_answer_key", "job", ["answer_key"])


def downgrade() -> None:
    op.drop_index("ix_job_answer_key", table_name="job")
    # SQLite drops a column by rebuilding the table
    with op.batch_alter_table("job") as batch:
        batch.drop_column("answer_key")
