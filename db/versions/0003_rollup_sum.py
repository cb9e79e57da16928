"""the total of each metric per rollup window (exact event counts per window, e.g. chatter)

Rows written before this revision keep a NULL sum: their actuations may be gone or too many to
re-add, and NULL tells a reader to fall back on what count, p50, p95 and max allow.

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("rollups") as batch_op:
        batch_op.add_column(sa.Column("sum", sa.Float(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("rollups") as batch_op:
        batch_op.drop_column("sum")
