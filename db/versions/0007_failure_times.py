"""when a unit failed, and when it first broke its spec

`unit_life` gains, for a failed unit, `failed_at_ns` (the run time of the failing actuation, in the run
`unit_life.run_id`) and `failed_at` (the host's wall-clock time, UTC, of the batch in which the recorder
judged the failure); and for the unit's first actuation judged FAIL against its part's spec,
`first_break_cycle`, `first_break_run_id`, `first_break_ns` (its run time) and `first_break_at` (wall
clock, UTC).

A store written before this revision keeps every row. Its failures and first spec breaks get the run
time of the stored actuation they name, which is exact: the failing actuation is the break of the failure
cycle for `welded`, its make for `missed_make`, and for any other mode (chatter) the cycle's first
actuation with chatter. The wall-clock times were never stored and stay NULL ("time not recorded").

Revision ID: 0007
Revises: 0006
Create Date: 2026-12-04
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0007"
down_revision = "0006"
branch_labels = None
depends_on = None

# the failing actuation of unit_life's failure cycle (the same rule as benchlog/store/_write.py)
_FAILING = """
    FROM actuations a
    WHERE a.unit_id = unit_life.unit_id AND a.cycle = unit_life.failed_at_cycle AND a.t_start_ns >= 0
      AND ((unit_life.failure_mode = 'welded' AND a.kind = 1)
        OR (unit_life.failure_mode = 'missed_make' AND a.kind = 0)
        OR (unit_life.failure_mode NOT IN ('welded', 'missed_make') AND a.chatter > 0))
"""
_FIRST_BREAK = """
    FROM actuations a
    WHERE a.unit_id = unit_life.unit_id AND a.cycle = unit_life.first_break_cycle AND a.verdict = 2
"""


def upgrade() -> None:
    with op.batch_alter_table("unit_life") as batch_op:
        batch_op.add_column(sa.Column("failed_at_ns", sa.BigInteger(), nullable=True))
        batch_op.add_column(sa.Column("failed_at", sa.DateTime(timezone=True), nullable=True))
        batch_op.add_column(sa.Column("first_break_cycle", sa.BigInteger(), nullable=True))
        batch_op.add_column(sa.Column("first_break_run_id", sa.Integer(), nullable=True))
        batch_op.add_column(sa.Column("first_break_ns", sa.BigInteger(), nullable=True))
        batch_op.add_column(sa.Column("first_break_at", sa.DateTime(timezone=True), nullable=True))
    op.execute(
        f"UPDATE unit_life SET failed_at_ns = (SELECT MIN(a.t_start_ns) {_FAILING}) "
        "WHERE status = 'failed' AND failed_at_cycle IS NOT NULL"
    )
    # verdict 2 = FAIL (benchlog/analysis/_types.py)
    op.execute(
        "UPDATE unit_life SET first_break_cycle = "
        "(SELECT MIN(a.cycle) FROM actuations a WHERE a.unit_id = unit_life.unit_id AND a.verdict = 2)"
    )
    op.execute(
        f"UPDATE unit_life SET first_break_ns = (SELECT MIN(a.t_start_ns) {_FIRST_BREAK}), "
        f"first_break_run_id = (SELECT MIN(a.run_id) {_FIRST_BREAK}) "
        "WHERE first_break_cycle IS NOT NULL"
    )


def downgrade() -> None:
    with op.batch_alter_table("unit_life") as batch_op:
        for name in (
            "first_break_at",
            "first_break_ns",
            "first_break_run_id",
            "first_break_cycle",
            "failed_at",
            "failed_at_ns",
        ):
            batch_op.drop_column(name)
