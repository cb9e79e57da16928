"""The read API: what the dashboard, reports, statistics and export read. See docs/store.md.

Every method opens its own short transaction, so it works on a live run being written by another
process (SQLite WAL readers never block the writer) and on a finished database alike.
"""

from __future__ import annotations

import sqlite3
import time
from dataclasses import dataclass, field
from datetime import UTC, datetime
from numbers import Integral

import numpy as np
from numpy.lib.recfunctions import repack_fields
from sqlalchemy import and_, func, select
from sqlalchemy.exc import SQLAlchemyError

from benchlog._inert import inert
from benchlog.analysis._types import BREAK, MAKE
from benchlog.errors import DataError, StoreError
from benchlog.events import TimedEdges

from . import _schema as s
from ._codec import decode_edges
from ._engine import _one_line, _shown, damaged
from ._write import ACT_FIELDS, LEASE_SECONDS, STORED_ACTUATION_DTYPE

KIND_NAMES = {MAKE: "make", BREAK: "break"}

LIFE_DTYPE = np.dtype([("unit_id", np.int64), ("cycles", np.int64), ("failed", np.bool_)])


def _utc(dt: datetime | None) -> datetime | None:
    if dt is None:
        return None
    return dt.replace(tzinfo=UTC) if dt.tzinfo is None else dt.astimezone(UTC)


@dataclass(frozen=True, slots=True)
class PartInfo:
    id: int
    part_number: str
    supplier: str
    spec_toml: str | None
    spec: dict | None


@dataclass(frozen=True, slots=True)
class LotInfo:
    id: int
    part_id: int
    part_number: str
    code: str


@dataclass(frozen=True, slots=True)
class UnitInfo:
    id: int
    serial: str
    notes: str
    lot_id: int
    lot: str
    part_id: int
    part_number: str
    supplier: str
    status: str  # alive / failed / removed
    cycles: int  # cycles survived so far (or at failure)
    failed_at_cycle: int | None
    failure_mode: str | None
    # revision 0007 (None: not recorded). Failure: run time of the failing actuation in run `run_id`,
    # and the host's wall-clock time (UTC) when the recorder judged it; likewise the first actuation
    # judged FAIL against the spec (`first_break_*`, in run `first_break_run_id`)
    run_id: int | None = None
    failed_at_ns: int | None = None
    failed_at: datetime | None = None
    first_break_cycle: int | None = None
    first_break_run_id: int | None = None
    first_break_ns: int | None = None
    first_break_at: datetime | None = None
    # revision 0008: the first drift flag the recorder raised: metric, life cycle (the last of the window
    # that raised it), run, run time of that window's last actuation, wall-clock time (UTC)
    first_drift_metric: str | None = None
    first_drift_cycle: int | None = None
    first_drift_run_id: int | None = None
    first_drift_ns: int | None = None
    first_drift_at: datetime | None = None


@dataclass(frozen=True, slots=True)
class BenchInfo:
    id: int
    name: str
    board_id: str | None
    clock_hz: int | None
    counter_bits: int | None
    channels: int | None
    recording: bool  # a recorder holds the bench and its heartbeat is current
    live_run_id: int | None


@dataclass(frozen=True, slots=True)
class RunInfo:
    id: int
    bench_id: int
    bench: str
    started_at: datetime
    ended_at: datetime | None
    end_reason: str | None  # None while live, or after a crash (see `state`)
    end_detail: str
    heartbeat_at: datetime | None
    profile: dict
    target_cycles: int  # 0 = until stopped
    cycles_done: int  # the least advanced alive unit's cycles in this run
    rate_cps: float  # recent cycles per second
    incidents: int
    units: int
    units_failed: int
    software_version: str
    protocol_version: int | None
    board_id: str | None
    rollup_window: int
    segments: int
    note: str

    @property
    def state(self) -> str:
        """'live' (heartbeat current), 'interrupted' (no end and no heartbeat: resumable) or 'ended'."""
        if self.ended_at is not None:
            return "ended"
        if self.heartbeat_at and (datetime.now(UTC) - self.heartbeat_at).total_seconds() < LEASE_SECONDS:
            return "live"
        return "interrupted"

    @property
    def live(self) -> bool:
        return self.state == "live"

    @property
    def eta_s(self) -> float | None:
        if not self.target_cycles or self.rate_cps <= 0:
            return None
        return max(0, self.target_cycles - self.cycles_done) / self.rate_cps


@dataclass(frozen=True, slots=True)
class RollupPoint:
    cycle_lo: int
    cycle_hi: int
    count: int
    p50: float
    p95: float
    max: float
    sum: float  # total of the window's values; NaN in windows written before revision 0003


@dataclass(frozen=True, slots=True)
class RunUnitInfo:
    channel: int
    unit: UnitInfo
    cycle_base: int  # the unit's cycles before this run
    cycles_done: int  # cycles recorded in this run
    latest: dict[tuple[str, str], RollupPoint] = field(default_factory=dict)  # (kind, metric) -> last window


@dataclass(frozen=True, slots=True)
class IncidentInfo:
    id: int
    run_id: int
    kind: str
    t_start_ns: int
    t_end_ns: int
    host_start_ns: int
    host_end_ns: int
    edges_lost: int | None
    channel: int | None
    detail: str
    cycles_lost: int | None = None

    @property
    def duration_s(self) -> float:
        """Length in host (wall-clock) time; in run time when no host times were recorded."""
        host = self.host_end_ns - self.host_start_ns
        return (host if host > 0 else self.t_end_ns - self.t_start_ns) / 1e9


@dataclass(frozen=True, slots=True, eq=False)
class Trend:
    """One metric of one unit over its life, one point per rollup window (sorted by cycle)."""

    unit_id: int
    metric: str
    kind: int
    cycle_lo: np.ndarray
    cycle_hi: np.ndarray
    count: np.ndarray
    p50: np.ndarray
    p95: np.ndarray
    max: np.ndarray
    sum: np.ndarray  # total of each window's values; NaN for windows written before revision 0003

    def __len__(self) -> int:
        return len(self.cycle_lo)


@dataclass(frozen=True, slots=True, eq=False)
class LifeTable:
    """Per unit: cycles survived and whether it failed (False = suspension). For Weibull fits."""

    unit_id: np.ndarray  # int64
    serial: list[str]
    lot: list[str]
    part_number: list[str]
    cycles: np.ndarray  # int64: failure cycle, or cycles survived so far / at removal
    failed: np.ndarray  # bool
    mode: list[str | None]

    def __len__(self) -> int:
        return len(self.unit_id)


def _ints(values) -> list[int]:
    """Ids as Python ints (numpy integers are not bound as integers by every driver)."""
    return [int(v) for v in values]


def _float(v) -> float:
    return float("nan") if v is None else float(v)


def _kind(kind: int | str) -> int:
    if isinstance(kind, str):
        for k, name in KIND_NAMES.items():
            if name == kind:
                return k
        raise DataError(f"unknown actuation kind {kind!r}: make or break")
    return int(kind)


# PostgreSQL's binary COPY format (https://www.postgresql.org/docs/current/sql-copy.html, "Binary
# Format"): a 19-byte header, then per row an int16 field count and per field an int32 length and the
# value in network byte order; -1 as the field count ends the data. With no NULLs every row has the same
# length, so the whole answer is one big-endian structured array.
_PG_COPY_HEADER = b"PGCOPY\n\xff\r\n\x00"
_PG_WIDTH = {"small": (">i2", 2), "int": (">i4", 4), "big": (">i8", 8), "float": (">f8", 8)}
_PG_SQL_KIND = {"unit_id": "big", "run_id": "big", **dict(s.ACTUATION_COLUMNS)}
_PG_ROW_FIELDS = [("nfields", ">i2")] + [
    pair for name in ACT_FIELDS for pair in ((f"len_{name}", ">i4"), (name, _PG_WIDTH[_PG_SQL_KIND[name]][0]))
]
_PG_ROW_DTYPE = np.dtype(_PG_ROW_FIELDS)


def _pg_binary_actuations(raw, sql: str, params: dict) -> np.ndarray | None:
    """The rows of `sql` through `COPY (sql) TO STDOUT (FORMAT binary)`, or None when they are not all
    of the fixed layout (a NULL somewhere, a column of another width): the caller fetches them then."""
    buf = bytearray()
    with raw.cursor() as cur, cur.copy(f"COPY ({sql}) TO STDOUT (FORMAT binary)", params) as copy:
        for block in copy:
            buf += block
    if len(buf) < 21 or not buf.startswith(_PG_COPY_HEADER):
        return None
    ext = int.from_bytes(buf[15:19], "big")
    start = 19 + ext
    body = len(buf) - start - 2  # the int16 -1 trailer
    if body < 0 or body % _PG_ROW_DTYPE.itemsize or buf[-2:] != b"\xff\xff":
        return None
    n = body // _PG_ROW_DTYPE.itemsize
    rows = np.frombuffer(buf, _PG_ROW_DTYPE, count=n, offset=start)
    if (rows["nfields"] != len(ACT_FIELDS)).any():
        return None
    for name in ACT_FIELDS:
        if (rows[f"len_{name}"] != _PG_WIDTH[_PG_SQL_KIND[name]][1]).any():
            return None
    out = np.empty(len(rows), STORED_ACTUATION_DTYPE)
    for name in ACT_FIELDS:
        out[name] = rows[name]
    return out


def _only(arr: np.ndarray, fields: tuple[str, ...] | None) -> np.ndarray:
    """`arr` with only `fields` (all when None), packed."""
    if fields is None or arr.dtype.names == tuple(fields):
        return arr
    return repack_fields(arr[list(fields)])


class ReadAPI:
    engine: object
    # set for a store whose names are only shown (dashboard, report): serials, lot codes, bench and
    # part names, suppliers and notes come back through `inert` (see benchlog/_inert.py)
    inert_names: bool = False

    def _nm(self, text):
        return inert(text) if self.inert_names and text is not None else text

    def _read(self, what: str):
        store = self

        class _Ctx:
            def __enter__(self):
                try:
                    self.c = store.engine.connect()
                except SQLAlchemyError as exc:
                    raise StoreError(f"cannot read {what}: {_one_line(exc)}") from exc
                return self.c

            def __exit__(self, et, ev, tb):
                self.c.close()
                if isinstance(ev, StoreError):
                    return False
                if isinstance(ev, SQLAlchemyError | sqlite3.Error):
                    bad = damaged(ev, _shown(store.engine.url))
                    raise (bad or StoreError(f"cannot read {what}: {_one_line(ev)}")) from ev
                return False

        return _Ctx()

    # -- catalogue ------------------------------------------------------------------------------------
    def parts(self) -> list[PartInfo]:
        with self._read("parts") as c:
            rows = c.execute(select(s.Part).order_by(s.Part.part_number)).mappings().all()
            return [
                PartInfo(
                    p["id"],
                    self._nm(p["part_number"]),
                    self._nm(p["supplier"]),
                    p["spec_toml"],
                    p["spec_json"],
                )
                for p in rows
            ]

    def lots(self, part: int | str | None = None) -> list[LotInfo]:
        q = select(s.Lot.id, s.Lot.part_id, s.Part.part_number, s.Lot.code).join(s.Part)
        if part is not None:
            q = q.where(self._part_cond(part))
        with self._read("lots") as c:
            rows = c.execute(q.order_by(s.Part.part_number, s.Lot.code)).all()
            return [LotInfo(r[0], r[1], self._nm(r[2]), self._nm(r[3])) for r in rows]

    def units(
        self, *, part: int | str | None = None, lot: int | str | None = None, ids: list[int] | None = None
    ) -> list[UnitInfo]:
        q = self._unit_query()
        if part is not None:
            q = q.where(self._part_cond(part))
        if lot is not None:
            q = q.where(self._lot_cond(lot))
        if ids is not None:
            q = q.where(s.Unit.id.in_(_ints(ids)))
        with self._read("units") as c:
            return [self._unit_info(r) for r in c.execute(q.order_by(s.Unit.id)).all()]

    def benches(self) -> list[BenchInfo]:
        now = time.time()
        with self._read("benches") as c:
            out = []
            for b in c.execute(select(s.Bench).order_by(s.Bench.name)).mappings().all():
                live = c.execute(
                    select(s.Run.id)
                    .where(s.Run.bench_id == b["id"], s.Run.ended_at.is_(None))
                    .order_by(s.Run.id.desc())
                ).scalar()
                recording = b["lease_token"] is not None and (b["lease_until"] or 0) >= now
                out.append(
                    BenchInfo(
                        b["id"],
                        self._nm(b["name"]),
                        b["board_id"],
                        b["clock_hz"],
                        b["counter_bits"],
                        b["channels"],
                        recording,
                        live if recording else None,
                    )
                )
            return out

    # -- runs -----------------------------------------------------------------------------------------
    def runs(
        self, *, bench: int | str | None = None, state: str | None = None, limit: int | None = None
    ) -> list[RunInfo]:
        """Runs, newest first; `state` filters on RunInfo.state ('live', 'interrupted', 'ended')."""
        q = self._run_query()
        if bench is not None:
            q = q.where(s.Bench.id == int(bench) if isinstance(bench, Integral) else s.Bench.name == bench)
        q = q.order_by(s.Run.id.desc())
        with self._read("runs") as c:
            out = [self._run_info(r) for r in c.execute(q).all()]
        if state is not None:
            out = [r for r in out if r.state == state]
        return out[:limit] if limit else out

    def run(self, run_id: int) -> RunInfo:
        run_id = int(run_id)
        with self._read(f"run {run_id}") as c:
            row = c.execute(self._run_query().where(s.Run.id == run_id)).first()
        if row is None:
            raise DataError(f"no run {run_id} in this database")
        return self._run_info(row)

    def run_units(self, run_id: int) -> list[RunUnitInfo]:
        """The units of a run, by channel, with life status and each metric's latest rollup window."""
        run_id = int(run_id)
        q = self._unit_query().add_columns(s.RunUnit.channel, s.RunUnit.cycle_base, s.RunUnit.cycles_done)
        q = q.join(s.RunUnit, s.RunUnit.unit_id == s.Unit.id).where(s.RunUnit.run_id == run_id)
        with self._read(f"units of run {run_id}") as c:
            rows = c.execute(q.order_by(s.RunUnit.channel)).all()
            out = []
            for r in rows:
                unit = self._unit_info(r)
                latest = {}
                last_w = (
                    select(s.Rollup.kind, s.Rollup.metric, func.max(s.Rollup.window_no).label("w"))
                    .where(s.Rollup.unit_id == unit.id, s.Rollup.run_id == run_id)
                    .group_by(s.Rollup.kind, s.Rollup.metric)
                    .subquery()
                )
                pts = (
                    c.execute(
                        select(s.Rollup)
                        .join(
                            last_w,
                            and_(
                                s.Rollup.kind == last_w.c.kind,
                                s.Rollup.metric == last_w.c.metric,
                                s.Rollup.window_no == last_w.c.w,
                            ),
                        )
                        .where(s.Rollup.unit_id == unit.id, s.Rollup.run_id == run_id)
                    )
                    .mappings()
                    .all()
                )
                for p in pts:
                    latest[(KIND_NAMES.get(p["kind"], str(p["kind"])), p["metric"])] = RollupPoint(
                        p["cycle_lo"],
                        p["cycle_hi"],
                        p["count"],
                        _float(p["p50"]),
                        _float(p["p95"]),
                        _float(p["max"]),
                        _float(p["sum"]),
                    )
                out.append(RunUnitInfo(r.channel, unit, int(r.cycle_base), int(r.cycles_done), latest))
            return out

    def incidents(self, run_id: int, *, kind: str | None = None) -> list[IncidentInfo]:
        run_id = int(run_id)
        q = select(s.Incident).where(s.Incident.run_id == run_id)
        if kind is not None:
            q = q.where(s.Incident.kind == kind)
        with self._read(f"incidents of run {run_id}") as c:
            rows = c.execute(q.order_by(s.Incident.t_start_ns, s.Incident.id)).mappings().all()
            return [IncidentInfo(**dict(i)) for i in rows]

    # -- measurements ---------------------------------------------------------------------------------
    def trend(self, unit_id: int, metric: str, *, kind: int | str = MAKE, run_id: int | None = None) -> Trend:
        """One metric of one unit per rollup window (from the rollups; never scans actuations)."""
        unit_id, run_id = int(unit_id), None if run_id is None else int(run_id)
        if metric not in s.ROLLUP_METRICS:
            raise DataError(f"no rollups for {metric!r}: one of {', '.join(s.ROLLUP_METRICS)}")
        k = _kind(kind)
        with self._read(f"the trend of unit {unit_id}") as c:
            # straight through the driver: tens of thousands of rows, no per-row objects in between
            mark = "?" if c.dialect.name == "sqlite" else "%s"
            sql = (
                'SELECT cycle_lo, cycle_hi, "count", p50, p95, "max", "sum" FROM rollups '
                f"WHERE unit_id = {mark} AND metric = {mark} AND kind = {mark}"
            )
            params: tuple = (unit_id, metric, k)
            if run_id is not None:
                sql += f" AND run_id = {mark}"
                params += (run_id,)
            cur = c.connection.driver_connection.cursor()
            try:
                cur.execute(sql, params)
                rows = cur.fetchall()
            finally:
                cur.close()
        arr = np.array(
            rows,
            dtype=[
                ("lo", np.int64),
                ("hi", np.int64),
                ("n", np.int64),
                ("p50", np.float64),
                ("p95", np.float64),
                ("max", np.float64),
                ("sum", np.float64),
            ],
        )
        arr = arr[np.argsort(arr["lo"], kind="stable")]
        return Trend(
            unit_id, metric, k, arr["lo"], arr["hi"], arr["n"], arr["p50"], arr["p95"], arr["max"], arr["sum"]
        )

    def actuations(
        self,
        *,
        units: list[int] | None = None,
        lots: list[int] | None = None,
        parts: list[int | str] | None = None,
        runs: list[int] | None = None,
        kind: int | str | None = None,
        cycles: tuple[int, int] | None = None,
        fields: tuple[str, ...] | None = None,
    ) -> np.ndarray:
        """Actuations as a numpy array of STORED_ACTUATION_DTYPE (unit_id, run_id, then every column of
        ACTUATION_DTYPE; NaN where not applicable), ordered by unit, cycle and kind. Filters combine
        with AND; `cycles` is an inclusive range of life cycles. `fields`: only these columns, in this
        order (a reader of a night's millions of rows that needs a few: SQLite builds a Python tuple
        of every column of every row)."""
        a = s.Actuation.__table__.c
        cond = []
        if units is not None:
            cond.append(a.unit_id.in_(_ints(units)))
        if runs is not None:
            cond.append(a.run_id.in_(_ints(runs)))
        if lots is not None or parts is not None:
            uq = select(s.Unit.id).join(s.Lot)
            if lots is not None:
                uq = uq.where(s.Lot.id.in_(_ints(lots)))
            if parts is not None:
                ids = [int(p) for p in parts if isinstance(p, Integral)]
                names = [p for p in parts if isinstance(p, str)]
                uq = uq.join(s.Part).where(s.Part.id.in_(ids) | s.Part.part_number.in_(names))
            cond.append(a.unit_id.in_(uq.scalar_subquery()))
        if kind is not None:
            cond.append(a.kind == _kind(kind))
        if cycles is not None:
            cond.append(a.cycle.between(int(cycles[0]), int(cycles[1])))
        if fields is not None:
            unknown = [f for f in fields if f not in ACT_FIELDS]
            if unknown or not fields:
                raise ValueError(f"no actuation column {', '.join(unknown) or '(none given)'}")
        with self._read("actuations") as c:
            return self._fetch_actuations(c, cond, fields)

    def _fetch_actuations(self, c, cond, fields: tuple[str, ...] | None = None) -> np.ndarray:
        """The query compiled once by SQLAlchemy, then run on the DBAPI cursor of `c` (in its
        transaction): PostgreSQL sends the rows as a binary COPY that numpy reads in one view;
        SQLite's plain tuples go into the structured array in one `np.array` call."""
        a = s.Actuation.__table__.c
        pg = c.dialect.name == "postgresql"
        names = ACT_FIELDS if fields is None or pg else tuple(fields)  # the binary COPY reads them all
        dtype = np.dtype([(n, STORED_ACTUATION_DTYPE.fields[n][0]) for n in names])
        q = select(*[a[n] for n in names]).where(*cond).order_by(a.unit_id, a.cycle, a.kind)
        compiled = q.compile(dialect=c.dialect, compile_kwargs={"render_postcompile": True})
        raw = c.connection.driver_connection
        if pg:
            params = dict(compiled.params)
            arr = _pg_binary_actuations(raw, compiled.string, params)
            if arr is not None:
                return _only(arr, fields)
            cur = raw.cursor()
            try:
                cur.execute(compiled.string, params)
                rows = cur.fetchall()
            finally:
                cur.close()
        else:
            params = tuple(compiled.params[name] for name in compiled.positiontup or ())
            cur = raw.cursor()
            try:
                cur.execute(compiled.string, params)
                rows = cur.fetchall()
            finally:
                cur.close()
        if not rows:
            return _only(np.zeros(0, dtype), fields)
        return _only(np.array(rows, dtype=dtype), fields)

    def edges(
        self,
        unit_id: int,
        *,
        run_id: int | None = None,
        t_ns: tuple[int, int] | None = None,
        cycles: tuple[int, int] | None = None,
    ) -> TimedEdges:
        """Raw edges of one unit, in run time, over `t_ns` [start, end] or over the life `cycles`
        [first, last] (from the start of the first to the start of the cycle after the last)."""
        unit_id, run_id = int(unit_id), None if run_id is None else int(run_id)
        e = s.EdgeChunk.__table__.c
        with self._read(f"edges of unit {unit_id}") as c:
            if cycles is not None:
                a = s.Actuation.__table__.c
                base = [a.unit_id == unit_id] + ([a.run_id == run_id] if run_id is not None else [])
                lo = c.execute(
                    select(func.min(a.t_start_ns)).where(*base, a.cycle == int(cycles[0]))
                ).scalar()
                if lo is None:
                    lo = c.execute(
                        select(func.min(a.t_start_ns)).where(*base, a.cycle >= int(cycles[0]))
                    ).scalar()
                hi = c.execute(select(func.min(a.t_start_ns)).where(*base, a.cycle > int(cycles[1]))).scalar()
                if lo is None:
                    return TimedEdges.empty()
                t_ns = (int(lo), int(hi) - 1 if hi is not None else 2**63 - 1)
            q = select(e.t_lo_ns, e.count, e.t_data, e.level_data, e.channel).where(e.unit_id == unit_id)
            if run_id is not None:
                q = q.where(e.run_id == run_id)
            if t_ns is not None:
                q = q.where(e.t_hi_ns >= int(t_ns[0]), e.t_lo_ns <= int(t_ns[1]))
            chunks = c.execute(q.order_by(e.t_lo_ns, e.id)).all()
        parts = []
        for lo_ns, count, t_data, level_data, channel in chunks:
            t, lv = decode_edges(lo_ns, count, t_data, level_data)
            parts.append(TimedEdges(t, np.full(len(t), channel, np.uint8), lv))
        out = TimedEdges.concat(parts)
        if t_ns is not None and len(out):
            out = out.select((out.t_ns >= t_ns[0]) & (out.t_ns <= t_ns[1]))
        return out

    def life_table(self, *, part: int | str | None = None, lot: int | str | None = None) -> LifeTable:
        """Every unit of a part and/or lot: cycles survived, failed or not (a suspension), mode."""
        q = self._unit_query()
        if part is not None:
            q = q.where(self._part_cond(part))
        if lot is not None:
            q = q.where(self._lot_cond(lot))
        with self._read("the life table") as c:
            units = [self._unit_info(r) for r in c.execute(q.order_by(s.Unit.id)).all()]
        return LifeTable(
            np.array([u.id for u in units], np.int64),
            [u.serial for u in units],
            [u.lot for u in units],
            [u.part_number for u in units],
            np.array([u.failed_at_cycle if u.status == s.FAILED else u.cycles for u in units], np.int64),
            np.array([u.status == s.FAILED for u in units], np.bool_),
            [u.failure_mode for u in units],
        )

    # -- helpers --------------------------------------------------------------------------------------
    @staticmethod
    def _part_cond(part: int | str):
        return s.Part.id == int(part) if isinstance(part, Integral) else s.Part.part_number == part

    @staticmethod
    def _lot_cond(lot: int | str):
        return s.Lot.id == int(lot) if isinstance(lot, Integral) else s.Lot.code == lot

    @staticmethod
    def _unit_query():
        return (
            select(
                s.Unit.id,
                s.Unit.serial,
                s.Unit.notes,
                s.Lot.id.label("lot_id"),
                s.Lot.code,
                s.Part.id.label("part_id"),
                s.Part.part_number,
                s.Part.supplier,
                s.UnitLife.status,
                s.UnitLife.cycles,
                s.UnitLife.failed_at_cycle,
                s.UnitLife.failure_mode,
                s.UnitLife.run_id.label("life_run_id"),
                s.UnitLife.failed_at_ns,
                s.UnitLife.failed_at,
                s.UnitLife.first_break_cycle,
                s.UnitLife.first_break_run_id,
                s.UnitLife.first_break_ns,
                s.UnitLife.first_break_at,
                s.UnitLife.first_drift_metric,
                s.UnitLife.first_drift_cycle,
                s.UnitLife.first_drift_run_id,
                s.UnitLife.first_drift_ns,
                s.UnitLife.first_drift_at,
            )
            .join(s.Lot, s.Unit.lot_id == s.Lot.id)
            .join(s.Part, s.Lot.part_id == s.Part.id)
            .outerjoin(s.UnitLife, s.UnitLife.unit_id == s.Unit.id)
        )

    def _unit_info(self, r) -> UnitInfo:
        nm = self._nm
        return UnitInfo(
            r.id,
            nm(r.serial),
            nm(r.notes),
            r.lot_id,
            nm(r.code),
            r.part_id,
            nm(r.part_number),
            nm(r.supplier),
            r.status or s.ALIVE,
            int(r.cycles or 0),
            r.failed_at_cycle,
            r.failure_mode,
            r.life_run_id,
            r.failed_at_ns,
            _utc(r.failed_at),
            r.first_break_cycle,
            r.first_break_run_id,
            r.first_break_ns,
            _utc(r.first_break_at),
            r.first_drift_metric,
            r.first_drift_cycle,
            r.first_drift_run_id,
            r.first_drift_ns,
            _utc(r.first_drift_at),
        )

    @staticmethod
    def _run_query():
        inc = select(func.count(s.Incident.id)).where(s.Incident.run_id == s.Run.id).scalar_subquery()
        nunits = (
            select(func.count()).select_from(s.RunUnit).where(s.RunUnit.run_id == s.Run.id).scalar_subquery()
        )
        nfail = (
            select(func.count())
            .select_from(s.RunUnit)
            .join(s.UnitLife, s.UnitLife.unit_id == s.RunUnit.unit_id)
            .where(s.RunUnit.run_id == s.Run.id, s.UnitLife.status == s.FAILED)
            .scalar_subquery()
        )
        return select(
            *s.Run.__table__.c,
            s.Bench.name.label("bench_name"),
            inc.label("n_inc"),
            nunits.label("n_units"),
            nfail.label("n_fail"),
        ).join(s.Bench, s.Run.bench_id == s.Bench.id)

    def _run_info(self, row) -> RunInfo:
        r = row
        return RunInfo(
            r.id,
            r.bench_id,
            self._nm(row.bench_name),
            _utc(r.started_at),
            _utc(r.ended_at),
            r.end_reason,
            r.end_detail or "",
            _utc(r.heartbeat_at),
            r.profile or {},
            int(r.target_cycles),
            int(r.cycles_done),
            float(r.rate_cps or 0.0),
            int(row.n_inc),
            int(row.n_units),
            int(row.n_fail),
            r.software_version,
            r.protocol_version,
            r.board_id,
            int(r.rollup_window),
            int(r.segments),
            self._nm(r.note or ""),
        )
