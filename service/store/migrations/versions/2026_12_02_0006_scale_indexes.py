"""Indexes for a year of nightly work: a dataset's scores by candidate and metric, its jobs by time.

Revision ID: 0006
Revises: 0004
Created: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

from alembic import op

revision: str = "0006"
down_revision: str | None = "0004"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_index(
        "ix_fold_score_analyst_page",
        "fold_score",
        ["dataset_hash", "candidate_key", "metric", "id"],
    )
    op.create_index("ix_job_dataset_created", "job", ["dataset_hash", "created_at"])


def downgrade() -> None:
    op.drop_index("ix_job_dataset_created", table_name="job")
    op.drop_index("ix_fold_score_analyst_page", table_name="fold_score")
