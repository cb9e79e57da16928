"""The store's tables, as SQLAlchemy 2.x typed ORM models on one `DeclarativeBase`.

The ORM classes describe the schema and serve the small, rare writes (registering a part, starting a
run). The hot paths (actuations, edge chunks, rollups) go through the driver's bulk path in `_write.py`
against the same tables (`Actuation.__table__`, ...). The first Alembic revision in `db/versions/`
creates exactly these tables; any change here needs a new revision there.
"""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import (
    JSON,
    BigInteger,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    SmallInteger,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

# SQLite auto-increments only a key typed exactly INTEGER; PostgreSQL gets BIGINT (identity).
BigKey = BigInteger().with_variant(Integer, "sqlite")

# Columns of ACTUATION_DTYPE, in order, with the SQL type each is stored as.
ACTUATION_COLUMNS: tuple[tuple[str, str], ...] = (
    ("channel", "small"),
    ("kind", "small"),
    ("cycle", "big"),
    ("t_start_ns", "big"),
    ("t_first_ns", "big"),
    ("t_settle_ns", "big"),
    ("transit_us", "float"),
    ("bounce_us", "float"),
    ("bounce_count", "int"),
    ("longest_gap_us", "float"),
    ("wrong_state_us", "float"),
    ("glitches", "int"),
    ("chatter", "int"),
    ("transfer_us", "float"),
    ("flags", "int"),
    ("verdict", "small"),
    ("t_end_ns", "big"),
    ("drive_level", "small"),
)

# Unit life status values.
ALIVE = "alive"
FAILED = "failed"
REMOVED = "removed"
LIFE_STATUSES = (ALIVE, FAILED, REMOVED)

# How a run ended (runs.end_reason); NULL while live or after a crash.
END_TARGET = "target"  # every alive unit reached the cycle target
END_ALL_FAILED = "all_failed"  # every unit failed
END_STOPPED = "stopped"  # Ctrl-C / stop requested
END_PORT_LOST = "port_lost"  # the port was lost for good
END_STORE_ERROR = "store_error"  # the database refused a write (disk full, read-only)
END_ERROR = "error"
END_IDLE = "sampler_idle"  # the sampler stopped cycling before the target was seen (cycles lost)
END_REASONS = (END_TARGET, END_ALL_FAILED, END_STOPPED, END_PORT_LOST, END_STORE_ERROR, END_ERROR, END_IDLE)


class Base(DeclarativeBase):
    pass


class Part(Base):
    """A part number from one supplier, with its spec as loaded (TOML text and parsed JSON)."""

    __tablename__ = "parts"
    id: Mapped[int] = mapped_column(BigKey, primary_key=True)
    part_number: Mapped[str] = mapped_column(String(200), unique=True)
    supplier: Mapped[str] = mapped_column(String(200), default="")
    spec_toml: Mapped[str | None] = mapped_column(Text)
    spec_json: Mapped[dict | None] = mapped_column(JSON)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))


class Lot(Base):
    __tablename__ = "lots"
    __table_args__ = (UniqueConstraint("part_id", "code", name="uq_lots_part_code"),)
    id: Mapped[int] = mapped_column(BigKey, primary_key=True)
    part_id: Mapped[int] = mapped_column(ForeignKey("parts.id"))
    code: Mapped[str] = mapped_column(String(200))
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))


class Unit(Base):
    """One device under test."""

    __tablename__ = "units"
    __table_args__ = (UniqueConstraint("lot_id", "serial", name="uq_units_lot_serial"),)
    id: Mapped[int] = mapped_column(BigKey, primary_key=True)
    lot_id: Mapped[int] = mapped_column(ForeignKey("lots.id"))
    serial: Mapped[str] = mapped_column(String(200))
    notes: Mapped[str] = mapped_column(Text, default="")
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))


class Bench(Base):
    """One sampler and its channels. The lease columns make one recorder at a time per bench."""

    __tablename__ = "benches"
    id: Mapped[int] = mapped_column(BigKey, primary_key=True)
    name: Mapped[str] = mapped_column(String(200), unique=True)
    board_id: Mapped[str | None] = mapped_column(String(64))
    clock_hz: Mapped[int | None] = mapped_column(BigInteger)
    counter_bits: Mapped[int | None] = mapped_column(SmallInteger)
    channels: Mapped[int | None] = mapped_column(SmallInteger)
    lease_token: Mapped[str | None] = mapped_column(String(64))
    lease_host: Mapped[str | None] = mapped_column(String(200))
    lease_pid: Mapped[int | None] = mapped_column(Integer)
    lease_until: Mapped[float | None] = mapped_column(Float)  # epoch seconds
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))


class Run(Base):
    """One continuous session on a bench (a resumed run stays the same run)."""

    __tablename__ = "runs"
    id: Mapped[int] = mapped_column(BigKey, primary_key=True)
    bench_id: Mapped[int] = mapped_column(ForeignKey("benches.id"), index=True)
    started_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    ended_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))
    end_reason: Mapped[str | None] = mapped_column(String(32))
    end_detail: Mapped[str] = mapped_column(Text, default="")
    heartbeat_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))
    profile: Mapped[dict] = mapped_column(JSON)  # {"on_ms":.., "off_ms":.., "cycles":..}
    target_cycles: Mapped[int] = mapped_column(BigInteger, default=0)  # 0 = until stopped
    cycles_done: Mapped[int] = mapped_column(BigInteger, default=0)  # min over the run's units
    rate_cps: Mapped[float] = mapped_column(Float, default=0.0)  # recent cycles per second
    software_version: Mapped[str] = mapped_column(String(64))
    protocol_version: Mapped[int | None] = mapped_column(SmallInteger)
    board_id: Mapped[str | None] = mapped_column(String(64))
    clock_hz: Mapped[int | None] = mapped_column(BigInteger)
    rollup_window: Mapped[int] = mapped_column(Integer, default=100)  # cycles per rollup window
    fail_after: Mapped[int] = mapped_column(Integer, default=5)  # consecutive failing cycles
    t_offset_ns: Mapped[int] = mapped_column(BigInteger, default=0)  # run time of the latest segment start
    segments: Mapped[int] = mapped_column(Integer, default=1)  # 1 + times resumed
    note: Mapped[str] = mapped_column(Text, default="", server_default="")  # revision 0002


class RunUnit(Base):
    """Which unit sat on which channel of a run; `cycle_base` = the unit's cycles before this run."""

    __tablename__ = "run_units"
    __table_args__ = (UniqueConstraint("run_id", "unit_id", name="uq_run_units_unit"),)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id"), primary_key=True)
    channel: Mapped[int] = mapped_column(SmallInteger, primary_key=True)
    unit_id: Mapped[int] = mapped_column(ForeignKey("units.id"), index=True)
    cycle_base: Mapped[int] = mapped_column(BigInteger, default=0)
    cycles_done: Mapped[int] = mapped_column(BigInteger, default=0)  # highest cycle recorded in the run
    # run cycles done when the sampler's current plan started (its count + this = run cycles done)
    sampler_base: Mapped[int | None] = mapped_column(BigInteger, nullable=True)


class UnitLife(Base):
    """A unit's life status: alive, failed at cycle N with a mode, or removed (a suspension)."""

    __tablename__ = "unit_life"
    unit_id: Mapped[int] = mapped_column(ForeignKey("units.id"), primary_key=True)
    status: Mapped[str] = mapped_column(String(16), default=ALIVE)
    cycles: Mapped[int] = mapped_column(BigInteger, default=0)  # cycles survived so far / at failure
    failed_at_cycle: Mapped[int | None] = mapped_column(BigInteger)
    failure_mode: Mapped[str | None] = mapped_column(String(32))
    run_id: Mapped[int | None] = mapped_column(ForeignKey("runs.id"))
    detail: Mapped[str] = mapped_column(Text, default="")
    updated_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    # revision 0007: when it failed (run time of the failing actuation in run_id; host wall clock, UTC)
    failed_at_ns: Mapped[int | None] = mapped_column(BigInteger)
    failed_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))
    # the unit's first actuation judged FAIL against its spec: life cycle, run, run time, wall clock
    first_break_cycle: Mapped[int | None] = mapped_column(BigInteger)
    first_break_run_id: Mapped[int | None] = mapped_column(Integer)
    first_break_ns: Mapped[int | None] = mapped_column(BigInteger)
    first_break_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))
    # revision 0008: when the recorder first flagged the unit's drift: the metric, the last life cycle of
    # the window that raised the flag, its run and run time (that actuation's), and the host's wall clock
    first_drift_metric: Mapped[str | None] = mapped_column(String(32))
    first_drift_cycle: Mapped[int | None] = mapped_column(BigInteger)
    first_drift_run_id: Mapped[int | None] = mapped_column(Integer)
    first_drift_ns: Mapped[int | None] = mapped_column(BigInteger)
    first_drift_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))


class Actuation(Base):
    """One make or break of one unit: every column of ACTUATION_DTYPE plus unit and run."""

    __tablename__ = "actuations"
    # one make and one break per cycle of a unit's life: a second row of the same kind is refused
    __table_args__ = (Index("ux_actuations_unit_cycle_kind", "unit_id", "cycle", "kind", unique=True),)
    id: Mapped[int] = mapped_column(BigKey, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id"))
    unit_id: Mapped[int] = mapped_column(ForeignKey("units.id"))
    channel: Mapped[int] = mapped_column(SmallInteger)
    kind: Mapped[int] = mapped_column(SmallInteger)
    cycle: Mapped[int] = mapped_column(BigInteger)  # the unit's life cycle (cycle_base + run cycle)
    t_start_ns: Mapped[int] = mapped_column(BigInteger)
    t_first_ns: Mapped[int] = mapped_column(BigInteger)
    t_settle_ns: Mapped[int] = mapped_column(BigInteger)
    transit_us: Mapped[float | None] = mapped_column(Float)  # NULL = NaN (not applicable)
    bounce_us: Mapped[float | None] = mapped_column(Float)
    bounce_count: Mapped[int] = mapped_column(Integer)
    longest_gap_us: Mapped[float | None] = mapped_column(Float)
    wrong_state_us: Mapped[float | None] = mapped_column(Float)
    glitches: Mapped[int] = mapped_column(Integer)
    chatter: Mapped[int] = mapped_column(Integer)
    transfer_us: Mapped[float | None] = mapped_column(Float)
    flags: Mapped[int] = mapped_column(Integer)
    verdict: Mapped[int] = mapped_column(SmallInteger)
    t_end_ns: Mapped[int] = mapped_column(BigInteger)
    drive_level: Mapped[int] = mapped_column(SmallInteger)


class Incident(Base):
    """Something that happened to the data (disconnect, reset, decode fault, gap, overflow, ...)."""

    __tablename__ = "incidents"
    id: Mapped[int] = mapped_column(BigKey, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id"), index=True)
    kind: Mapped[str] = mapped_column(String(32))
    t_start_ns: Mapped[int] = mapped_column(BigInteger)
    t_end_ns: Mapped[int] = mapped_column(BigInteger)
    host_start_ns: Mapped[int] = mapped_column(BigInteger)
    host_end_ns: Mapped[int] = mapped_column(BigInteger)
    edges_lost: Mapped[int | None] = mapped_column(BigInteger)
    channel: Mapped[int | None] = mapped_column(SmallInteger)
    detail: Mapped[str] = mapped_column(Text, default="")
    cycles_lost: Mapped[int | None] = mapped_column(BigInteger, nullable=True)


class EdgeChunk(Base):
    """Raw edges of one unit over one span: zlib of delta-encoded int64 t_ns, and of the levels."""

    __tablename__ = "edge_chunks"
    __table_args__ = (Index("ix_edge_chunks_unit_t", "unit_id", "t_lo_ns"),)
    id: Mapped[int] = mapped_column(BigKey, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id"))
    unit_id: Mapped[int] = mapped_column(ForeignKey("units.id"))
    channel: Mapped[int] = mapped_column(SmallInteger)
    t_lo_ns: Mapped[int] = mapped_column(BigInteger)
    t_hi_ns: Mapped[int] = mapped_column(BigInteger)
    count: Mapped[int] = mapped_column(Integer)
    t_data: Mapped[bytes] = mapped_column(LargeBinary)
    level_data: Mapped[bytes] = mapped_column(LargeBinary)


class Rollup(Base):
    """Per unit, run, kind and metric, one window of cycles: count, p50, p95, max and sum (the total of
    the window's values; NULL in rows written before revision 0003)."""

    __tablename__ = "rollups"
    unit_id: Mapped[int] = mapped_column(ForeignKey("units.id"), primary_key=True)
    metric: Mapped[str] = mapped_column(String(32), primary_key=True)
    kind: Mapped[int] = mapped_column(SmallInteger, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id"), primary_key=True)
    window_no: Mapped[int] = mapped_column(BigInteger, primary_key=True)
    cycle_lo: Mapped[int] = mapped_column(BigInteger)
    cycle_hi: Mapped[int] = mapped_column(BigInteger)
    count: Mapped[int] = mapped_column(Integer)
    p50: Mapped[float | None] = mapped_column(Float)
    p95: Mapped[float | None] = mapped_column(Float)
    max: Mapped[float | None] = mapped_column(Float)
    sum: Mapped[float | None] = mapped_column(Float)


class Summary(Base):
    """Per run, unit, series (`make.bounce_us`, `cycle.chatter`, ...) and window of SUMMARY_WINDOW life
    cycles: a mergeable distribution summary (benchlog/store/_summary.py). `bins` and `counts` are
    zlib (RFC 1950) of little-endian int64 arrays: the occupied histogram bins and their exact counts."""

    __tablename__ = "summaries"
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id"), primary_key=True)
    unit_id: Mapped[int] = mapped_column(ForeignKey("units.id"), primary_key=True)
    series: Mapped[str] = mapped_column(String(32), primary_key=True)
    window_no: Mapped[int] = mapped_column(BigInteger, primary_key=True)
    count: Mapped[int] = mapped_column(BigInteger)
    sum: Mapped[float] = mapped_column(Float)
    sumsq: Mapped[float] = mapped_column(Float)
    min: Mapped[float] = mapped_column(Float)
    max: Mapped[float] = mapped_column(Float)
    bins: Mapped[bytes] = mapped_column(LargeBinary)
    counts: Mapped[bytes] = mapped_column(LargeBinary)

    __table_args__ = (Index("ix_summaries_unit", "unit_id", "series"),)


# Metrics the rollups keep (all float-valued columns of ACTUATION_DTYPE plus the counts).
ROLLUP_METRICS = (
    "transit_us",
    "bounce_us",
    "bounce_count",
    "longest_gap_us",
    "wrong_state_us",
    "glitches",
    "chatter",
    "transfer_us",
)

metadata = Base.metadata
