"""the sampler keeps the count (protocol version 2)

`run_units.sampler_base`: the run cycles the channel had done when the sampler's current plan started,
so that a resumed recorder turns the sampler's count (cycles since its plan started) into the unit's
run cycles. `incidents.cycles_lost`: how many cycles a "cycles not observed" incident stands for.

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0005"
down_revision = "0004"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("run_units") as batch_op:
        batch_op.add_column(sa.Column("sampler_base", sa.BigInteger(), nullable=True))
    with op.batch_alter_table("incidents") as batch_op:
        batch_op.add_column(sa.Column("cycles_lost", sa.BigInteger(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("incidents") as batch_op:
        batch_op.drop_column("cycles_lost")
    with op.batch_alter_table("run_units") as batch_op:
        batch_op.drop_column("sampler_base")
