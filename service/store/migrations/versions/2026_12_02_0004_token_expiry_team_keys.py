"""Token expiry and shown prefix; idempotency keys unique per team; each team's own origin of a
registered table.

Existing registrations: the earliest registration of each table takes the table's stored origin
(the team that first brought it); later registrations keep none rather than another team's.

Revision ID: 0004
Revises: 0003
Created: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op
from sqlalchemy.dialects import postgresql

revision: str = "0004"
down_revision: str | None = "0003"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_JSON = sa.JSON().with_variant(postgresql.JSONB(astext_type=sa.Text()), "postgresql")


def upgrade() -> None:
    op.add_column("api_token", sa.Column("prefix", sa.String(length=16), nullable=True))
    op.add_column("api_token", sa.Column("expires_at", sa.DateTime(timezone=True), nullable=True))
    op.add_column("dataset_registration", sa.Column("origin", _JSON, nullable=True))
    op.execute(
        """
        UPDATE dataset_registration SET origin = (
            SELECT dataset.origin FROM dataset
            WHERE dataset.content_hash = dataset_registration.content_hash
        )
        WHERE created_at = (
            SELECT MIN(earlier.created_at) FROM dataset_registration AS earlier
            WHERE earlier.content_hash = dataset_registration.content_hash
        )
        """
    )
    # SQLite cannot drop a constraint in place: batch mode copies the table
    with op.batch_alter_table("job") as batch:
        batch.drop_constraint("uq_job_idempotency_key", type_="unique")
        batch.create_unique_constraint("uq_job_team_idempotency_key", ["team", "idempotency_key"])


def downgrade() -> None:
    with op.batch_alter_table("job") as batch:
        batch.drop_constraint("uq_job_team_idempotency_key", type_="unique")
        batch.create_unique_constraint("uq_job_idempotency_key", ["idempotency_key"])
    with op.batch_alter_table("dataset_registration") as batch:
        batch.drop_column("origin")
    with op.batch_alter_table("api_token") as batch:
        batch.drop_column("expires_at")
        batch.drop_column("prefix")
