"""when the recorder first flagged a unit's drift

`unit_life` gains the first drift flag the recorder raised on the unit while recording: the metric
(`first_drift_metric`: make_bounce, break_bounce, operate_time or release_time), the last life cycle of
the rollup window whose completion raised it (`first_drift_cycle`), the run and the run time of that
window's last actuation of the metric's kind (`first_drift_run_id`, `first_drift_ns`), and the host's
wall-clock time, UTC, of the judgement (`first_drift_at`).

A store written before this revision keeps every row; its units have no first drift flag recorded (all
NULL): the recorder did not judge drift then, and the dashboard still computes the flag from the trends.

Revision ID: 0008
Revises: 0007
Create Date: 2026-12-05
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0008"
down_revision = "0007"
branch_labels = None
depends_on = None

_COLUMNS = (
    "first_drift_metric",
    "first_drift_cycle",
    "first_drift_run_id",
    "first_drift_ns",
    "first_drift_at",
)


def upgrade() -> None:
    with op.batch_alter_table("unit_life") as batch_op:
        batch_op.add_column(sa.Column("first_drift_metric", sa.String(length=32), nullable=True))
        batch_op.add_column(sa.Column("first_drift_cycle", sa.BigInteger(), nullable=True))
        batch_op.add_column(sa.Column("first_drift_run_id", sa.Integer(), nullable=True))
        batch_op.add_column(sa.Column("first_drift_ns", sa.BigInteger(), nullable=True))
        batch_op.add_column(sa.Column("first_drift_at", sa.DateTime(timezone=True), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("unit_life") as batch_op:
        for name in reversed(_COLUMNS):
            batch_op.drop_column(name)
