"""A halving search's round on work_unit: a candidate raced on one scope has a unit per round.

Revision ID: 0013
Revises: 0012
Created: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0013"
down_revision: str | None = "0012"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    # every stored unit is a full-grid unit or a refit: round 0, as the server default says
    # SQLite cannot change a unique constraint in place: batch mode copies the table
    with op.batch_alter_table("work_unit") as batch:
        batch.add_column(
            sa.Column("halving_round", sa.Integer(), nullable=False, server_default="0")
        )
        batch.drop_constraint("uq_work_unit_job_id_kind_scope_candidate_key", type_="unique")
        batch.create_unique_constraint(
            "uq_work_unit_job_id_kind_scope_candidate_key_halving_round",
            ["job_id", "kind", "scope", "candidate_key", "halving_round"],
        )


def downgrade() -> None:
    # a halving job's later rounds have no place in the old key: drop their units first
    op.execute("DELETE FROM work_unit WHERE halving_round <> 0")
    with op.batch_alter_table("work_unit") as batch:
        batch.drop_constraint(
            "uq_work_unit_job_id_kind_scope_candidate_key_halving_round", type_="unique"
        )
        batch.create_unique_constraint(
            "uq_work_unit_job_id_kind_scope_candidate_key",
            ["job_id", "kind", "scope", "candidate_key"],
        )
        batch.drop_column("halving_round")
