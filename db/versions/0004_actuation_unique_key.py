"""one actuation per unit, cycle and kind (a unique key; duplicates of older stores removed)

Stores written before this revision may hold the same (unit, cycle, kind) twice, written at the
boundary of a resumed run. The earliest row of each such group is kept (the one written first, in
the segment that measured it); the later copies are deleted before the unique index is built. The
old non-unique index on (unit, cycle) is replaced: the new one serves the same lookups.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-03
"""

from __future__ import annotations

from alembic import op

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.execute(
        "DELETE FROM actuations WHERE id NOT IN "
        "(SELECT MIN(id) FROM actuations GROUP BY unit_id, cycle, kind)"
    )
    op.drop_index("ix_actuations_unit_cycle", table_name="actuations")
    op.create_index("ux_actuations_unit_cycle_kind", "actuations", ["unit_id", "cycle", "kind"], unique=True)


def downgrade() -> None:
    op.drop_index("ux_actuations_unit_cycle_kind", table_name="actuations")
    op.create_index("ix_actuations_unit_cycle", "actuations", ["unit_id", "cycle"], unique=False)
