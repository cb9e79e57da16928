"""create the schema

Revision ID: 0001
Revises:
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "benches",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("board_id", sa.String(length=64), nullable=True),
        sa.Column("clock_hz", sa.BigInteger(), nullable=True),
        sa.Column("counter_bits", sa.SmallInteger(), nullable=True),
        sa.Column("channels", sa.SmallInteger(), nullable=True),
        sa.Column("lease_token", sa.String(length=64), nullable=True),
        sa.Column("lease_host", sa.String(length=200), nullable=True),
        sa.Column("lease_pid", sa.Integer(), nullable=True),
        sa.Column("lease_until", sa.Float(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("name"),
    )
    op.create_table(
        "parts",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("part_number", sa.String(length=200), nullable=False),
        sa.Column("supplier", sa.String(length=200), nullable=False),
        sa.Column("spec_toml", sa.Text(), nullable=True),
        sa.Column("spec_json", sa.JSON(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("part_number"),
    )
    op.create_table(
        "lots",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("part_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("code", sa.String(length=200), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(
            ["part_id"],
            ["parts.id"],
        ),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("part_id", "code", name="uq_lots_part_code"),
    )
    op.create_table(
        "runs",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("bench_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("started_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("ended_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("end_reason", sa.String(length=32), nullable=True),
        sa.Column("end_detail", sa.Text(), nullable=False),
        sa.Column("heartbeat_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("profile", sa.JSON(), nullable=False),
        sa.Column("target_cycles", sa.BigInteger(), nullable=False),
        sa.Column("cycles_done", sa.BigInteger(), nullable=False),
        sa.Column("rate_cps", sa.Float(), nullable=False),
        sa.Column("software_version", sa.String(length=64), nullable=False),
        sa.Column("protocol_version", sa.SmallInteger(), nullable=True),
        sa.Column("board_id", sa.String(length=64), nullable=True),
        sa.Column("clock_hz", sa.BigInteger(), nullable=True),
        sa.Column("rollup_window", sa.Integer(), nullable=False),
        sa.Column("fail_after", sa.Integer(), nullable=False),
        sa.Column("t_offset_ns", sa.BigInteger(), nullable=False),
        sa.Column("segments", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(
            ["bench_id"],
            ["benches.id"],
        ),
        sa.PrimaryKeyConstraint("id"),
    )
    with op.batch_alter_table("runs", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_runs_bench_id"), ["bench_id"], unique=False)

    op.create_table(
        "incidents",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("run_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("kind", sa.String(length=32), nullable=False),
        sa.Column("t_start_ns", sa.BigInteger(), nullable=False),
        sa.Column("t_end_ns", sa.BigInteger(), nullable=False),
        sa.Column("host_start_ns", sa.BigInteger(), nullable=False),
        sa.Column("host_end_ns", sa.BigInteger(), nullable=False),
        sa.Column("edges_lost", sa.BigInteger(), nullable=True),
        sa.Column("channel", sa.SmallInteger(), nullable=True),
        sa.Column("detail", sa.Text(), nullable=False),
        sa.ForeignKeyConstraint(
            ["run_id"],
            ["runs.id"],
        ),
        sa.PrimaryKeyConstraint("id"),
    )
    with op.batch_alter_table("incidents", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_incidents_run_id"), ["run_id"], unique=False)

    op.create_table(
        "units",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("lot_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("serial", sa.String(length=200), nullable=False),
        sa.Column("notes", sa.Text(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(
            ["lot_id"],
            ["lots.id"],
        ),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("lot_id", "serial", name="uq_units_lot_serial"),
    )
    op.create_table(
        "actuations",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("run_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("unit_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("channel", sa.SmallInteger(), nullable=False),
        sa.Column("kind", sa.SmallInteger(), nullable=False),
        sa.Column("cycle", sa.BigInteger(), nullable=False),
        sa.Column("t_start_ns", sa.BigInteger(), nullable=False),
        sa.Column("t_first_ns", sa.BigInteger(), nullable=False),
        sa.Column("t_settle_ns", sa.BigInteger(), nullable=False),
        sa.Column("transit_us", sa.Float(), nullable=True),
        sa.Column("bounce_us", sa.Float(), nullable=True),
        sa.Column("bounce_count", sa.Integer(), nullable=False),
        sa.Column("longest_gap_us", sa.Float(), nullable=True),
        sa.Column("wrong_state_us", sa.Float(), nullable=True),
        sa.Column("glitches", sa.Integer(), nullable=False),
        sa.Column("chatter", sa.Integer(), nullable=False),
        sa.Column("transfer_us", sa.Float(), nullable=True),
        sa.Column("flags", sa.Integer(), nullable=False),
        sa.Column("verdict", sa.SmallInteger(), nullable=False),
        sa.Column("t_end_ns", sa.BigInteger(), nullable=False),
        sa.Column("drive_level", sa.SmallInteger(), nullable=False),
        sa.ForeignKeyConstraint(
            ["run_id"],
            ["runs.id"],
        ),
        sa.ForeignKeyConstraint(
            ["unit_id"],
            ["units.id"],
        ),
        sa.PrimaryKeyConstraint("id"),
    )
    with op.batch_alter_table("actuations", schema=None) as batch_op:
        batch_op.create_index("ix_actuations_unit_cycle", ["unit_id", "cycle"], unique=False)

    op.create_table(
        "edge_chunks",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("run_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("unit_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("channel", sa.SmallInteger(), nullable=False),
        sa.Column("t_lo_ns", sa.BigInteger(), nullable=False),
        sa.Column("t_hi_ns", sa.BigInteger(), nullable=False),
        sa.Column("count", sa.Integer(), nullable=False),
        sa.Column("t_data", sa.LargeBinary(), nullable=False),
        sa.Column("level_data", sa.LargeBinary(), nullable=False),
        sa.ForeignKeyConstraint(
            ["run_id"],
            ["runs.id"],
        ),
        sa.ForeignKeyConstraint(
            ["unit_id"],
            ["units.id"],
        ),
        sa.PrimaryKeyConstraint("id"),
    )
    with op.batch_alter_table("edge_chunks", schema=None) as batch_op:
        batch_op.create_index("ix_edge_chunks_unit_t", ["unit_id", "t_lo_ns"], unique=False)

    op.create_table(
        "rollups",
        sa.Column("unit_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("metric", sa.String(length=32), nullable=False),
        sa.Column("kind", sa.SmallInteger(), nullable=False),
        sa.Column("run_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("window_no", sa.BigInteger(), nullable=False),
        sa.Column("cycle_lo", sa.BigInteger(), nullable=False),
        sa.Column("cycle_hi", sa.BigInteger(), nullable=False),
        sa.Column("count", sa.Integer(), nullable=False),
        sa.Column("p50", sa.Float(), nullable=True),
        sa.Column("p95", sa.Float(), nullable=True),
        sa.Column("max", sa.Float(), nullable=True),
        sa.ForeignKeyConstraint(
            ["run_id"],
            ["runs.id"],
        ),
        sa.ForeignKeyConstraint(
            ["unit_id"],
            ["units.id"],
        ),
        sa.PrimaryKeyConstraint("unit_id", "metric", "kind", "run_id", "window_no"),
    )
    op.create_table(
        "run_units",
        sa.Column("run_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("channel", sa.SmallInteger(), nullable=False),
        sa.Column("unit_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("cycle_base", sa.BigInteger(), nullable=False),
        sa.Column("cycles_done", sa.BigInteger(), nullable=False),
        sa.ForeignKeyConstraint(
            ["run_id"],
            ["runs.id"],
        ),
        sa.ForeignKeyConstraint(
            ["unit_id"],
            ["units.id"],
        ),
        sa.PrimaryKeyConstraint("run_id", "channel"),
        sa.UniqueConstraint("run_id", "unit_id", name="uq_run_units_unit"),
    )
    with op.batch_alter_table("run_units", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_run_units_unit_id"), ["unit_id"], unique=False)

    op.create_table(
        "unit_life",
        sa.Column("unit_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("status", sa.String(length=16), nullable=False),
        sa.Column("cycles", sa.BigInteger(), nullable=False),
        sa.Column("failed_at_cycle", sa.BigInteger(), nullable=True),
        sa.Column("failure_mode", sa.String(length=32), nullable=True),
        sa.Column("run_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=True),
        sa.Column("detail", sa.Text(), nullable=False),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(
            ["run_id"],
            ["runs.id"],
        ),
        sa.ForeignKeyConstraint(
            ["unit_id"],
            ["units.id"],
        ),
        sa.PrimaryKeyConstraint("unit_id"),
    )


def downgrade() -> None:
    op.drop_table("unit_life")
    with op.batch_alter_table("run_units", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_run_units_unit_id"))

    op.drop_table("run_units")
    op.drop_table("rollups")
    with op.batch_alter_table("edge_chunks", schema=None) as batch_op:
        batch_op.drop_index("ix_edge_chunks_unit_t")

    op.drop_table("edge_chunks")
    with op.batch_alter_table("actuations", schema=None) as batch_op:
        batch_op.drop_index("ix_actuations_unit_cycle")

    op.drop_table("actuations")
    op.drop_table("units")
    with op.batch_alter_table("incidents", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_incidents_run_id"))

    op.drop_table("incidents")
    with op.batch_alter_table("runs", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_runs_bench_id"))

    op.drop_table("runs")
    op.drop_table("lots")
    op.drop_table("parts")
    op.drop_table("benches")
