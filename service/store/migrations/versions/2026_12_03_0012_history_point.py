"""A job's history point: the few values of its result a dataset's history shows.

Revision ID: 0012
Revises: 0011
Created: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import sqlalchemy as sa
from alembic import op
from sqlalchemy.dialects import postgresql

revision: str = "0012"
down_revision: str | None = "0011"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_JSON = sa.JSON().with_variant(postgresql.JSONB(astext_type=sa.Text()), "postgresql")
_BATCH = 500


def _point(result: dict[str, Any]) -> dict[str, Any] | None:
    # service/jobs/history_point.py as of this revision (a migration keeps its own copy: the
    # module may change after it)
    pick_by = result.get("pick_by")
    estimate = (result.get("estimate") or {}).get(pick_by) or {}
    final_pick = result.get("final_pick") or {}
    if estimate.get("mean") is None or final_pick.get("candidate_key") is None:
        return None
    return {
        "pick_by": pick_by,
        **{part: estimate.get(part) for part in ("mean", "se", "interval")},
        "final_pick": {p: final_pick.get(p) for p in ("candidate_key", "estimator", "params")},
    }


def upgrade() -> None:
    # nullable, no default: a plain ADD COLUMN on both stores; then every succeeded job's point
    # is written from its result, a batch at a time (a year of nightly jobs is a few thousand)
    op.add_column("job", sa.Column("history_point", _JSON, nullable=True))
    job = sa.table(
        "job",
        sa.column("id", sa.String),
        sa.column("status", sa.String),
        sa.column("result", _JSON),
        sa.column("history_point", _JSON),
    )
    connection = op.get_bind()
    last = ""
    while True:
        rows = connection.execute(
            sa.select(job.c.id, job.c.result)
            .where(job.c.status == "succeeded", job.c.id > last)
            .order_by(job.c.id)
            .limit(_BATCH)
        ).all()
        if not rows:
            return
        for job_id, result in rows:
            point = _point(result) if isinstance(result, dict) else None
            if point is not None:
                connection.execute(
                    sa.update(job).where(job.c.id == job_id).values(history_point=point)
                )
        last = rows[-1][0]


def downgrade() -> None:
    # SQLite drops a column by rebuilding the table
    with op.batch_alter_table("job") as batch:
        batch.drop_column("history_point")
