"""distribution summaries per run, unit, series and window (benchlog/store/_summary.py)

The upgrade builds the summaries of every run already stored from its actuations, read in batches
(memory stays flat whatever the store's size).

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-03
"""

from __future__ import annotations

import numpy as np
import sqlalchemy as sa
from alembic import op

revision = "0006"
down_revision = "0005"
branch_labels = None
depends_on = None

_BATCH = 200_000
_KEY = sa.BigInteger().with_variant(sa.Integer(), "sqlite")


def upgrade() -> None:
    op.create_table(
        "summaries",
        sa.Column("run_id", _KEY, sa.ForeignKey("runs.id"), primary_key=True),
        sa.Column("unit_id", _KEY, sa.ForeignKey("units.id"), primary_key=True),
        sa.Column("series", sa.String(32), primary_key=True),
        sa.Column("window_no", sa.BigInteger(), primary_key=True),
        sa.Column("count", sa.BigInteger(), nullable=False),
        sa.Column("sum", sa.Float(), nullable=False),
        sa.Column("sumsq", sa.Float(), nullable=False),
        sa.Column("min", sa.Float(), nullable=False),
        sa.Column("max", sa.Float(), nullable=False),
        sa.Column("bins", sa.LargeBinary(), nullable=False),
        sa.Column("counts", sa.LargeBinary(), nullable=False),
    )
    op.create_index("ix_summaries_unit", "summaries", ["unit_id", "series"])
    build_from_actuations(op.get_bind())


def build_from_actuations(conn) -> None:
    from benchlog.store._summary import SERIES, SummaryKeeper

    columns = sorted({col for _, col in SERIES.values()})
    names = ["run_id", "unit_id", "cycle", "kind", "drive_level", "flags", *columns]
    dtype = np.dtype([(n, np.int64) for n in names[:6]] + [(c, np.float64) for c in columns])
    query = sa.text(
        f"SELECT {', '.join(names)} FROM actuations ORDER BY run_id, unit_id, cycle, kind"  # noqa: S608
    )
    result = conn.execute(query.execution_options(stream_results=True))
    keeper = None
    try:
        while True:
            rows = result.fetchmany(_BATCH)
            if not rows:
                break
            arr = np.array([tuple(np.nan if v is None else v for v in r) for r in rows], dtype=dtype)
            for run in np.unique(arr["run_id"]).tolist():
                part = arr[arr["run_id"] == run]
                if keeper is None or keeper.run_id != run:
                    if keeper is not None:
                        keeper.write(conn, final=True)
                    keeper = SummaryKeeper(run)
                keeper.add(part["unit_id"], part)
                keeper.write(conn)
    finally:
        result.close()
    if keeper is not None:
        keeper.write(conn, final=True)


def downgrade() -> None:
    op.drop_index("ix_summaries_unit", table_name="summaries")
    op.drop_table("summaries")
