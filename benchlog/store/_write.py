"""The recorder's write path: batched, one transaction per flush, driver-level bulk inserts.

Actuations go in through the DBAPI driver directly: SQLite's `executemany` on the raw `sqlite3`
connection, PostgreSQL's `COPY ... FROM STDIN` through psycopg, with rows made by numpy `.tolist()`.
Everything one flush holds (actuations, edge chunks, incidents, rollups, progress, life status and the
bench lease heartbeat) commits together, so a crash loses at most what arrived since the last flush.
"""

from __future__ import annotations

import sqlite3
import threading
import time
from collections import deque
from collections.abc import Iterable
from dataclasses import dataclass
from datetime import UTC, datetime

import numpy as np
from sqlalchemy import func, insert, select, update
from sqlalchemy.exc import SQLAlchemyError

from benchlog.analysis._types import ACTUATION_DTYPE, BREAK, FAIL, MAKE
from benchlog.errors import StoreBusyError, StoreError
from benchlog.events import Incident, TimedEdges

from . import _schema as s
from ._codec import encode_edges
from ._engine import BUSY_TIMEOUT_MS, _one_line, damaged
from ._rollup import RollupKeeper
from ._summary import SummaryKeeper

# unit_id, run_id, then the store's actuation columns with ACTUATION_DTYPE's own numpy types (a column
# the analysis adds later and the store does not know yet fails tests/store/test_migrate.py).
_SQL_NP = {"small": np.uint8, "int": np.int32, "big": np.int64, "float": np.float64}
STORED_ACTUATION_DTYPE = np.dtype(
    [("unit_id", np.int64), ("run_id", np.int64)]
    + [
        (name, ACTUATION_DTYPE.fields[name][0] if name in ACTUATION_DTYPE.names else _SQL_NP[sql])
        for name, sql in s.ACTUATION_COLUMNS
    ]
)
ACT_FIELDS = STORED_ACTUATION_DTYPE.names
_ACT_COLS = ", ".join(ACT_FIELDS)
_SQLITE_ACT_INSERT = f"INSERT INTO actuations ({_ACT_COLS}) VALUES ({', '.join('?' * len(ACT_FIELDS))})"
_ROLLUP_COLS = (
    "unit_id",
    "metric",
    "kind",
    "run_id",
    "window_no",
    "cycle_lo",
    "cycle_hi",
    "count",
    "p50",
    "p95",
    "max",
    "sum",
)
_SQLITE_ROLLUP_INSERT = (
    f"INSERT INTO rollups ({', '.join(_ROLLUP_COLS)}) VALUES ({', '.join('?' * len(_ROLLUP_COLS))})"
)
CHUNK_MAX_EDGES = 65_536
PIPE_CHUNK = 4096  # rows turned into Python values and inserted at a time (bounds what is alive at once)
# rows per INSERT statement: 32 x 18 values a row, within the 999 variables a statement may hold in
# every SQLite version (sqlite.org/limits.html, SQLITE_MAX_VARIABLE_NUMBER; 32,766 since 3.32.0)
ROWS_PER_INSERT = 32
RATE_WINDOW_S = 10.0
_TIME_FIELDS = tuple(n for n in ("t_start_ns", "t_first_ns", "t_settle_ns", "t_end_ns") if n in ACT_FIELDS)
LEASE_SECONDS = 15.0
# A commit during a run waits this long for another program's write lock, then is put off to the next
# flush (SQLite's busy timeout on the writer's connection); the recorder meanwhile reads its port.
COMMIT_WAIT_MS = 2_000
# A store whose write lock is held this long without a break ends the recording (resumable).
STORE_WAIT_S = 600.0
# PostgreSQL SQLSTATEs of a transaction that lost to another one and may simply be run again
_PG_TRY_AGAIN = {"40001", "40P01", "55P03"}


class _LockWait(Exception):
    """Another program holds the write lock: the transaction was rolled back and may be run again."""


def _is_lock_wait(exc: BaseException) -> bool:
    """True for SQLite's SQLITE_BUSY / SQLITE_LOCKED and PostgreSQL's serialization failure, deadlock
    and lock-not-available: the transaction rolled back whole, and the same one may be tried again."""
    orig = getattr(exc, "orig", None) or exc
    code = getattr(orig, "sqlite_errorcode", None)
    if code is not None:
        return code & 0xFF in (sqlite3.SQLITE_BUSY, sqlite3.SQLITE_LOCKED)
    state = getattr(orig, "sqlstate", None)
    if state is not None:
        return state in _PG_TRY_AGAIN
    text = str(orig).lower()
    return "database is locked" in text or "database table is locked" in text or "database is busy" in text


@dataclass
class _Batch:
    """One flush's worth, in the store's units and life cycles; kept whole while its commit is put off."""

    acts: np.ndarray
    units: np.ndarray
    incidents: list
    chunks: list
    rollups: list
    done: int

    def joined(self, newer: _Batch) -> _Batch:
        return _Batch(
            np.concatenate([self.acts, newer.acts]),
            np.concatenate([self.units, newer.units]),
            self.incidents + newer.incidents,
            self.chunks + newer.chunks,
            self.rollups + newer.rollups,
            newer.done,
        )


def _store_error(action: str, exc: BaseException) -> StoreError:
    if isinstance(exc, StoreError):
        return exc
    bad = damaged(exc)
    if bad is not None:
        return bad
    text = _one_line(exc)
    low = text.lower()
    if "disk is full" in low or "no space" in low or "disk full" in low:
        return StoreError(f"cannot {action}: the disk is full ({text})")
    if "readonly" in low or "read-only" in low or "read only" in low:
        return StoreError(f"cannot {action}: the database is read-only ({text})")
    return StoreError(f"cannot {action}: {text}")


def _dbapi_errors() -> tuple[type[BaseException], ...]:
    errors: list[type[BaseException]] = [SQLAlchemyError, sqlite3.Error]
    try:
        import psycopg

        errors.append(psycopg.Error)
    except ImportError:  # PostgreSQL support not installed
        pass
    return tuple(errors)


DB_ERRORS = _dbapi_errors()


def sqlite_actuation_insert(run_id: int, unit_id: int, rows: int = 1) -> str:
    """The INSERT of one unit's actuations in one run, taking rows of ACTUATION_DTYPE exactly as numpy's
    `tolist` makes them: unit and run are constants of the statement, so no per-row work is left
    to Python (sqlite3 caches the prepared statement of each unit). With `rows` > 1, one statement
    takes that many rows, their values one after another (see `insert_rows`)."""
    names = ACTUATION_DTYPE.names
    known = {name for name, _ in s.ACTUATION_COLUMNS}
    if not set(names) <= known:
        raise StoreError(f"the store has no column for {sorted(set(names) - known)}; a migration is missing")
    cols = ["unit_id", "run_id", *names]
    vals = [str(int(unit_id)), str(int(run_id)), *("?" * len(names))]
    for name, _ in s.ACTUATION_COLUMNS:
        if name not in names:
            cols.append(name)
            vals.append("0")
    row = f"({', '.join(vals)})"
    return f"INSERT INTO actuations ({', '.join(cols)}) VALUES {', '.join([row] * rows)}"


def insert_rows(cursor, sql_one: str, sql_many: str, acts: np.ndarray) -> None:
    """SQLite: insert `acts` (a structured array in the statements' column order) through `sql_many`,
    a statement of ROWS_PER_INSERT rows, and the rows left over through `sql_one`. Each statement
    executed costs a reset, a step and sqlite3 letting go of the GIL and taking it back: paid once per
    ROWS_PER_INSERT rows, the rows go in faster (docs/store.md, "Writing"). The values are made a
    column at a time through an object matrix, with no tuple per row: about twice as fast as numpy's
    `tolist` of the rows followed by flattening them."""
    k = ROWS_PER_INSERT
    whole = len(acts) // k * k
    if whole:
        names = acts.dtype.names
        matrix = np.empty((whole, len(names)), object)
        for j, name in enumerate(names):
            matrix[:, j] = acts[name][:whole].tolist()
        cursor.executemany(sql_many, matrix.reshape(-1, len(names) * k).tolist())
    if whole < len(acts):
        cursor.executemany(sql_one, acts[whole:].tolist())


def bulk_insert_actuations(conn, rows: Iterable[tuple], sql: str | None = None) -> None:
    """Insert actuation tuples through the driver: SQLite `executemany` (of `sql`, default the
    STORED_ACTUATION_DTYPE column order), PostgreSQL `COPY` (STORED_ACTUATION_DTYPE order)."""
    raw = conn.connection.driver_connection
    if conn.dialect.name == "sqlite":
        raw.cursor().executemany(sql or _SQLITE_ACT_INSERT, rows)
    else:
        with raw.cursor() as cur, cur.copy(f"COPY actuations ({_ACT_COLS}) FROM STDIN") as copy:
            for row in rows:
                copy.write_row(row)


def bulk_insert_rollups(conn, rows: list[tuple]) -> None:
    if not rows:
        return
    raw = conn.connection.driver_connection
    if conn.dialect.name == "sqlite":
        raw.cursor().executemany(_SQLITE_ROLLUP_INSERT, rows)
    else:
        with raw.cursor() as cur, cur.copy(f"COPY rollups ({', '.join(_ROLLUP_COLS)}) FROM STDIN") as copy:
            for row in rows:
                copy.write_row(row)


def to_stored(acts: np.ndarray, unit_ids: np.ndarray, run_id: int) -> np.ndarray:
    out = np.zeros(len(acts), STORED_ACTUATION_DTYPE)
    present = acts.dtype.names
    for name in STORED_ACTUATION_DTYPE.names[2:]:
        if name in present:
            out[name] = acts[name]
    out["unit_id"] = unit_ids
    out["run_id"] = run_id
    return out


@dataclass(slots=True)
class FlushStats:
    actuations: int = 0
    edges: int = 0
    incidents: int = 0
    rollups: int = 0
    seconds: float = 0.0
    put_off: bool = False  # another program held the write lock: the batch waits for the next flush


def failing_actuation_ns(conn, unit_id: int, cycle: int, mode: str) -> int | None:
    """Run time of the actuation that failed a unit at life cycle `cycle`: the break for `welded`, the
    make for `missed_make`, for any other mode (chatter) the cycle's first actuation with chatter.
    None when it is not stored. (Revision 0007 applies the same rule to older stores.)"""
    a = s.Actuation
    cond = [a.unit_id == unit_id, a.cycle == cycle, a.t_start_ns >= 0]
    if mode == "welded":
        cond.append(a.kind == BREAK)
    elif mode == "missed_make":
        cond.append(a.kind == MAKE)
    else:
        cond.append(a.chatter > 0)
    t = conn.execute(select(func.min(a.t_start_ns)).where(*cond)).scalar()
    return None if t is None else int(t)


class RunWriter:
    """Writes one run (segment) of a bench. Made by `Store.start_run` / `Store.resume_run`.

    Feed it with `add(actuations=..., edges=..., incidents=...)` in *segment* time and run cycles as the
    analysis reports them (cycle 0 = first cycle of this segment); the writer shifts them to run time
    and to each unit's life cycle. `flush()` commits; call it at least once a second. `close(reason)`
    flushes the partial rollup windows, ends the run and releases the bench.
    """

    def __init__(self, store, run_id: int, lease_token: str) -> None:
        self.store = store
        self.run_id = run_id
        self.lease_token = lease_token
        self.closed = False
        self.dropped_unassigned = 0
        engine = store.engine
        with engine.connect() as c:
            run = c.execute(select(s.Run).where(s.Run.id == run_id)).mappings().one()
            self.bench_id = run["bench_id"]
            self.t_offset_ns = int(run["t_offset_ns"])
            self.target_cycles = int(run["target_cycles"])
            self.window = int(run["rollup_window"])
            assign = c.execute(
                select(
                    s.RunUnit.channel,
                    s.RunUnit.unit_id,
                    s.RunUnit.cycle_base,
                    s.RunUnit.cycles_done,
                    s.RunUnit.sampler_base,
                ).where(s.RunUnit.run_id == run_id)
            ).all()
            life_rows = c.execute(
                select(
                    s.UnitLife.unit_id,
                    s.UnitLife.status,
                    s.UnitLife.first_break_cycle,
                    s.UnitLife.first_drift_cycle,
                ).where(s.UnitLife.unit_id.in_([a.unit_id for a in assign]))
            ).all()
            life = {r.unit_id: r.status for r in life_rows}
        self.units = {a.channel: a.unit_id for a in assign}
        self.channel_of = {a.unit_id: a.channel for a in assign}
        self._lut = np.full(256, -1, np.int64)
        self._base = np.zeros(256, np.int64)  # life cycles of the unit before this segment
        self.seg_start = {}  # channel -> run cycles done before this segment
        self.cycles_done = {}  # channel -> run cycles done so far
        self.cycle_base = {}
        # run cycles done when the sampler's current plan started (protocol version 2), None: unknown
        self.sampler_base: dict[int, int | None] = {}
        for a in assign:
            self.sampler_base[a.channel] = None if a.sampler_base is None else int(a.sampler_base)
            self._lut[a.channel] = a.unit_id
            self._base[a.channel] = a.cycle_base + a.cycles_done
            self.seg_start[a.channel] = int(a.cycles_done)
            self.cycles_done[a.channel] = int(a.cycles_done)
            self.cycle_base[a.channel] = int(a.cycle_base)
        self.status = {a.unit_id: life.get(a.unit_id, s.ALIVE) for a in assign}
        # A segment may open on a break (the contact was closed when the last one ended). The analysis
        # numbers it like the cycle after it; it belongs to the unit's previous cycle when that one
        # has its make and no break stored, else it is a cycle of its own (its make went unseen).
        self._lead_settled: set[int] = set()
        self._shift = np.zeros(256, np.int64)
        self._break_owed = self._cycles_owing_a_break(engine)
        self._rollups = RollupKeeper(self.window)
        self._summaries = SummaryKeeper(run_id)
        self._acts: list[np.ndarray] = []  # ACTUATION_DTYPE, shifted to run time and life cycles
        self._act_units: list[np.ndarray] = []
        self._sqlite_insert = {
            ch: (sqlite_actuation_insert(run_id, u), sqlite_actuation_insert(run_id, u, ROWS_PER_INSERT))
            for ch, u in self.units.items()
        }
        self._edges: list[TimedEdges] = []
        self._incidents: list[Incident] = []
        self._life: dict[int, dict] = {}
        # failures whose failing actuation's run time is still to be read back: unit -> (cycle, mode)
        self._fail_time_due: dict[int, tuple[int, str]] = {}
        # the first actuation judged FAIL of each unit: units that have one stored, and those due
        self._broke: set[int] = {r.unit_id for r in life_rows if r.first_break_cycle is not None}
        self._break_due: dict[int, dict] = {}
        # the first drift flag of each unit (the recorder judges it): units that have one, and those due
        self.drift_flagged: set[int] = {r.unit_id for r in life_rows if r.first_drift_cycle is not None}
        self._drift_due: dict[int, dict] = {}
        # rollup rows committed, kept for a reader of the live trends (the recorder's drift judgement)
        # when `keep_rollups` is set; it takes them with `take_rollups()`
        self.keep_rollups = False
        self._rollups_written: list[tuple] = []
        self._rate = 0.0
        self._progress: deque[tuple[float, int]] = deque()  # (monotonic time, cycles done)
        self._last_flush = time.monotonic()
        self._last_done = self.run_cycles_done()
        self._conn = engine.connect()
        if self._conn.dialect.name == "sqlite":
            self._conn.exec_driver_sql(f"PRAGMA busy_timeout={COMMIT_WAIT_MS}")
            self._conn.commit()
        self._held: _Batch | None = None  # a batch whose commit was put off (another writer's lock)
        self._locked_since: float | None = None
        self.commits_put_off = 0
        self._seed_open_windows()

    # -- feeding ------------------------------------------------------------------------------------
    def add(
        self,
        *,
        actuations: np.ndarray | None = None,
        edges: TimedEdges | None = None,
        incidents: list[Incident] | tuple[Incident, ...] = (),
        numbered: np.ndarray | None = None,
    ) -> None:
        """`numbered` (one flag per actuation): rows whose cycle is the sampler's own number (run cycle
        minus the segment's start, protocol version 2), final as given: the renumbering of a segment's
        leading break below is for the analysis' numbers, which count from the segment's first
        actuation."""
        if actuations is not None and len(actuations):
            self._add_actuations(actuations, numbered)
        if edges is not None and len(edges):
            self._edges.append(edges)
        self._incidents.extend(incidents)

    def _add_actuations(self, acts: np.ndarray, numbered: np.ndarray | None = None) -> None:
        ch = acts["channel"].astype(np.intp)
        unit = self._lut[ch]
        numbered = np.zeros(len(acts), bool) if numbered is None else np.asarray(numbered, bool)
        keep = unit >= 0
        if not keep.all():
            self.dropped_unassigned += int((~keep).sum())
            acts, ch, unit, numbered = acts[keep], ch[keep], unit[keep], numbered[keep]
            if not len(acts):
                return
        if acts.dtype != ACTUATION_DTYPE:
            conv = np.zeros(len(acts), ACTUATION_DTYPE)
            for name in ACTUATION_DTYPE.names:
                if name in acts.dtype.names:
                    conv[name] = acts[name]
            rows = conv
        else:
            rows = acts.copy()
        self._number_leading_breaks(rows, ch, numbered)
        shift = np.where(numbered, 0, self._shift[ch])
        rows["cycle"] += self._base[ch] + shift
        off = np.int64(self.t_offset_ns)
        if off:
            for name in _TIME_FIELDS:
                col = rows[name]
                col[col >= 0] += off
        self._acts.append(rows)
        self._act_units.append(unit)
        self._note_first_breaks(rows, unit)
        # progress per channel: run cycles = segment start + (shifted) analysis cycle + 1
        order = np.argsort(ch, kind="stable")
        chs, first = np.unique(ch[order], return_index=True)
        top = np.maximum.reduceat((acts["cycle"] + shift)[order], first)
        for c, t in zip(chs.tolist(), top.tolist(), strict=True):
            done = self.seg_start[c] + int(t) + 1
            if done > self.cycles_done[c]:
                self.cycles_done[c] = done

    def _note_first_breaks(self, rows: np.ndarray, unit: np.ndarray) -> None:
        """Keep each unit's first actuation judged FAIL (run time and the host's time of its batch)."""
        bad = rows["verdict"] == FAIL
        if not bad.any():
            return
        wall = self.store.now()
        for u in np.unique(unit[bad]).tolist():
            if u in self._broke:
                continue
            mine = bad & (unit == u)
            i = int(np.flatnonzero(mine)[np.argmin(rows["cycle"][mine])])
            t = int(rows["t_start_ns"][i])
            self._broke.add(u)
            self._break_due[u] = {
                "first_break_cycle": int(rows["cycle"][i]),
                "first_break_run_id": self.run_id,
                "first_break_ns": t if t >= 0 else None,
                "first_break_at": wall,
            }

    def life_cycle(self, channel: int, analysis_cycle: int) -> int:
        """The unit's life cycle for an analysis cycle of this segment."""
        return int(self._base[channel]) + int(analysis_cycle) + int(self._shift[channel])

    def _cycles_owing_a_break(self, engine) -> set[int]:
        """Channels whose unit's last cycle before this segment has a make stored and no break."""
        owed: set[int] = set()
        with engine.connect() as c:
            for ch, unit in self.units.items():
                last = int(self._base[ch]) - 1
                if last < 0:
                    continue
                kinds = set(
                    c.execute(
                        select(s.Actuation.kind).where(s.Actuation.unit_id == unit, s.Actuation.cycle == last)
                    ).scalars()
                )
                if MAKE in kinds and BREAK not in kinds:
                    owed.add(ch)
        return owed

    def _number_leading_breaks(self, rows: np.ndarray, ch: np.ndarray, numbered: np.ndarray) -> None:
        """Settle, on each channel's first actuation of the segment, whether it opens on a break; that
        break goes to the previous cycle (owing one) or takes a cycle of its own (the rest shift by 1).

        A break the sampler numbered (by the drive-off of its cycle) is already its cycle's: moving it
        back and shifting the rest would count one cycle more than the sampler ran."""
        for c in np.unique(ch).tolist():
            if c in self._lead_settled:
                continue
            self._lead_settled.add(c)
            first = int(np.flatnonzero(ch == c)[0])
            if rows["kind"][first] == BREAK and not numbered[first]:
                rows["cycle"][first] -= 1
                if c not in self._break_owed:
                    self._shift[c] = 1

    def mark_failed(
        self, unit_id: int, cycle: int, mode: str, detail: str = "", at: datetime | None = None
    ) -> None:
        """Record the unit as failed at life cycle `cycle` with `mode` (committed with the next flush).

        `at`: the host's wall-clock time (aware) of the batch in which the failure was judged (default:
        now). The run time of the failing actuation is read back from the stored actuations at the
        flush that writes it (`failing_actuation_ns`)."""
        self.status[unit_id] = s.FAILED
        self._life[unit_id] = {
            "status": s.FAILED,
            "failed_at_cycle": int(cycle),
            "failure_mode": mode,
            "cycles": int(cycle),
            "detail": detail,
            "failed_at": (at or self.store.now()).astimezone(UTC),
            "failed_at_ns": None,
        }
        self._fail_time_due[unit_id] = (int(cycle), mode)

    def mark_drift(
        self, unit_id: int, metric: str, kind: int, cycle: int, at: datetime | None = None
    ) -> None:
        """Record the unit's first drift flag (once per unit; committed with the next flush): on `metric`
        (an analysis drift metric, of actuations of `kind`), raised by the rollup window ending at life
        cycle `cycle`; `at`: the host's wall-clock time of the judgement (default: now). The run time is
        that of the unit's actuation of `kind` at `cycle`, read back from the stored rows."""
        if unit_id in self.drift_flagged:
            return
        self.drift_flagged.add(unit_id)
        self._drift_due[unit_id] = {
            "first_drift_metric": metric,
            "first_drift_cycle": int(cycle),
            "first_drift_run_id": self.run_id,
            "first_drift_at": (at or self.store.now()).astimezone(UTC),
            "_kind": int(kind),
        }

    def take_rollups(self) -> list[tuple]:
        """The rollup rows committed since the last call (with `keep_rollups` set): (unit_id, metric,
        kind, run_id, window_no, cycle_lo, cycle_hi, count, p50, p95, max, sum)."""
        out, self._rollups_written = self._rollups_written, []
        return out

    def mark_removed(self, unit_id: int, detail: str = "") -> None:
        self.status[unit_id] = s.REMOVED
        ch = self.channel_of[unit_id]
        self._life[unit_id] = {
            "status": s.REMOVED,
            "detail": detail,
            "cycles": self.cycle_base[ch] + self.cycles_done[ch],
        }

    def run_cycles_done(self) -> int:
        alive = [self.cycles_done[c] for c, u in self.units.items() if self.status.get(u) == s.ALIVE]
        pool = alive or list(self.cycles_done.values())
        return min(pool) if pool else 0

    def alive_units(self) -> list[int]:
        return [u for u, st in self.status.items() if st == s.ALIVE]

    # -- committing ---------------------------------------------------------------------------------
    def flush(self, *, final: bool = False) -> FlushStats:
        """Commit what was added since the last commit, in one transaction.

        Another program holding the store's write lock (a second bench's recorder, `db` commands) is
        waited for up to COMMIT_WAIT_MS; past that the commit is put off and nothing is lost: the batch
        is kept, whole, and goes with the next flush (`FlushStats.put_off`), while the recorder goes on
        reading its port. A final flush tries again until it commits; only a store locked for
        STORE_WAIT_S without a break ends the recording (the run is left resumable at its last commit)."""
        t0 = time.perf_counter()
        batch, pending = self._take_batch(final)
        while True:
            try:
                self._commit(batch, final, pending)
                break
            except _LockWait as exc:
                pending = None  # settled: the batch holds all of it now
                self._held = batch
                now = time.monotonic()
                if self._locked_since is None:
                    self._locked_since = now
                waited = now - self._locked_since
                if waited >= STORE_WAIT_S:
                    raise StoreError(
                        "cannot write to the database: another program has held its write lock for"
                        f" {waited:.0f} s ({exc})"
                    ) from exc
                if not final:
                    self.commits_put_off += 1
                    return FlushStats(put_off=True, seconds=time.perf_counter() - t0)
                time.sleep(0.1)
        self._held = None
        self._locked_since = None
        stats = FlushStats()
        stats.actuations = len(batch.acts)
        stats.edges = sum(c["count"] for c in batch.chunks)
        stats.incidents = len(batch.incidents)
        stats.rollups = len(batch.rollups)
        if self.keep_rollups:
            self._rollups_written.extend(batch.rollups)
        self._life.clear()
        self._last_flush = time.monotonic()
        self._last_done = batch.done
        stats.seconds = time.perf_counter() - t0
        return stats

    def _take_batch(self, final: bool) -> tuple[_Batch, tuple]:
        """What was added since the last flush, joined to the batch a put-off commit still holds. Its
        rollups, summaries and edge chunks (numpy sorts, zlib) are worked out by a helper thread while
        the actuations go in: `_settle` adds them to the batch."""
        acts = np.concatenate(self._acts) if self._acts else np.zeros(0, ACTUATION_DTYPE)
        units = np.concatenate(self._act_units) if self._act_units else np.zeros(0, np.int64)
        edges, incidents = self._edges, self._incidents
        self._acts, self._act_units, self._edges, self._incidents = [], [], [], []
        side: dict = {}

        def prepare() -> None:
            try:
                side["rollups"] = self._rollups.add(units, acts, final=final)
                self._summaries.add(units, acts, final=final)
                side["chunks"] = self._chunks(edges)
            except BaseException as exc:  # re-raised in the flushing thread
                side["error"] = exc

        helper = threading.Thread(target=prepare, name="benchlog-rollups", daemon=True)
        helper.start()
        done = self.run_cycles_done()
        self._rate = self._update_rate(done)
        batch = _Batch(acts, units, incidents, [], [], done)
        if self._held is not None:
            batch = self._held.joined(batch)
        return batch, (helper, side)

    def _settle(self, batch: _Batch, pending: tuple) -> None:
        helper, side = pending
        helper.join()
        if "error" in side:
            raise side["error"]
        batch.rollups.extend(r[:3] + (self.run_id,) + r[4:] for r in side["rollups"])
        batch.chunks.extend(side["chunks"])

    def _commit(self, b: _Batch, final: bool, pending: tuple | None) -> None:
        conn = self._conn
        # what the progress write takes from these is given back if the transaction does not commit
        due = (
            dict(self._break_due),
            {u: dict(v) for u, v in self._drift_due.items()},
            dict(self._fail_time_due),
        )
        try:
            with conn.begin():
                try:
                    if len(b.acts):
                        if conn.dialect.name == "sqlite":
                            self._insert_by_channel(conn, b.acts)
                        else:
                            bulk_insert_actuations(conn, to_stored(b.acts, b.units, self.run_id).tolist())
                finally:
                    if pending is not None:
                        self._settle(b, pending)
                if b.chunks:
                    conn.execute(insert(s.EdgeChunk), b.chunks)
                if b.incidents:
                    conn.execute(insert(s.Incident), [self._incident_row(i) for i in b.incidents])
                bulk_insert_rollups(conn, b.rollups)
                self._summaries.write(conn, final=final)
                self._write_progress(conn, time.time(), b.done)
        except DB_ERRORS as exc:
            self._break_due, self._drift_due, self._fail_time_due = due
            if _is_lock_wait(exc):
                raise _LockWait(_one_line(exc)) from exc
            raise _store_error("write to the database", exc) from exc
        self._summaries.committed()

    def _update_rate(self, done: int) -> float:
        """Cycles per second over the last RATE_WINDOW_S seconds of flushes."""
        now = time.monotonic()
        self._progress.append((now, done))
        while len(self._progress) > 2 and now - self._progress[0][0] > RATE_WINDOW_S:
            self._progress.popleft()
        t0, d0 = self._progress[0]
        return (done - d0) / (now - t0) if now > t0 else 0.0

    def _insert_by_channel(self, conn, acts: np.ndarray) -> None:
        ch = acts["channel"]
        order = np.argsort(ch, kind="stable")
        acts = acts[order]
        chans, starts = np.unique(ch[order], return_index=True)
        ends = np.append(starts[1:], len(acts))
        pieces = [
            (self._sqlite_insert[c], a0, min(a0 + PIPE_CHUNK, b))
            for c, a, b in zip(chans.tolist(), starts.tolist(), ends.tolist(), strict=True)
            for a0 in range(a, b, PIPE_CHUNK)
        ]
        # One piece at a time, in this thread. A helper thread converting the next piece while sqlite3
        # inserted this one was slower (405,000 against 340,000-380,000 actuations/s here): with a
        # statement of ROWS_PER_INSERT rows, sqlite3 lets go of the GIL too seldom for the two to
        # overlap, and they took turns at it.
        cursor = conn.connection.driver_connection.cursor()
        for sql, a, b in pieces:
            insert_rows(cursor, *sql, acts[a:b])

    def _write_progress(self, conn, now: float, done: int) -> None:
        renewed = conn.execute(
            update(s.Bench)
            .where(s.Bench.id == self.bench_id, s.Bench.lease_token == self.lease_token)
            .values(lease_until=now + LEASE_SECONDS)
        ).rowcount
        if renewed != 1:
            raise StoreBusyError(f"lost the lease on bench {self.bench_id}: another recorder took it over")
        stamp = self.store.now()
        conn.execute(
            update(s.Run)
            .where(s.Run.id == self.run_id)
            .values(heartbeat_at=stamp, cycles_done=done, rate_cps=max(self._rate, 0.0))
        )
        for ch, cyc in self.cycles_done.items():
            conn.execute(
                update(s.RunUnit)
                .where(s.RunUnit.run_id == self.run_id, s.RunUnit.channel == ch)
                .values(cycles_done=cyc, sampler_base=self.sampler_base.get(ch))
            )
            unit = self.units[ch]
            values = self._life.get(unit)
            if values is None and self.status.get(unit) == s.ALIVE:
                values = {"cycles": self.cycle_base[ch] + cyc}
            if values is not None:
                conn.execute(
                    update(s.UnitLife)
                    .where(s.UnitLife.unit_id == unit)
                    .values(run_id=self.run_id, updated_at=stamp, **values)
                )
            if unit in self._break_due:
                conn.execute(
                    update(s.UnitLife).where(s.UnitLife.unit_id == unit).values(**self._break_due.pop(unit))
                )
            if unit in self._drift_due:
                values = self._drift_due.pop(unit)
                kind = values.pop("_kind")
                a = s.Actuation
                t_ns = conn.execute(
                    select(func.min(a.t_start_ns)).where(
                        a.unit_id == unit,
                        a.cycle == values["first_drift_cycle"],
                        a.kind == kind,
                        a.t_start_ns >= 0,
                    )
                ).scalar()
                values["first_drift_ns"] = None if t_ns is None else int(t_ns)
                conn.execute(update(s.UnitLife).where(s.UnitLife.unit_id == unit).values(**values))
            if unit in self._fail_time_due:
                t_ns = failing_actuation_ns(conn, unit, *self._fail_time_due[unit])
                if t_ns is not None:  # else its actuation is not written yet: the next flush looks again
                    del self._fail_time_due[unit]
                    conn.execute(
                        update(s.UnitLife).where(s.UnitLife.unit_id == unit).values(failed_at_ns=t_ns)
                    )

    def _incident_row(self, inc: Incident) -> dict:
        off = self.t_offset_ns
        return {
            "run_id": self.run_id,
            "kind": inc.kind,
            "t_start_ns": int(inc.t_start_ns) + off,
            "t_end_ns": int(inc.t_end_ns) + off,
            "host_start_ns": int(inc.host_start_ns),
            "host_end_ns": int(inc.host_end_ns),
            "edges_lost": None if inc.edges_lost is None else int(inc.edges_lost),
            "channel": inc.channel,
            "detail": inc.detail,
            "cycles_lost": getattr(inc, "cycles_lost", None),
        }

    def _chunks(self, edges: list[TimedEdges]) -> list[dict]:
        if not edges:
            return []
        e = TimedEdges.concat(edges)
        order = np.argsort(e.channel, kind="stable")
        ch_sorted = e.channel[order]
        chans, starts = np.unique(ch_sorted, return_index=True)
        ends = np.append(starts[1:], len(order))
        rows: list[dict] = []
        for ch, a, b in zip(chans.tolist(), starts.tolist(), ends.tolist(), strict=True):
            unit = int(self._lut[ch])
            if unit < 0:
                self.dropped_unassigned += b - a
                continue
            idx = order[a:b]
            t = e.t_ns[idx] + np.int64(self.t_offset_ns)
            lv = e.level[idx]
            for c0 in range(0, len(t), CHUNK_MAX_EDGES):
                tt, ll = t[c0 : c0 + CHUNK_MAX_EDGES], lv[c0 : c0 + CHUNK_MAX_EDGES]
                lo, hi, t_data, l_data = encode_edges(tt, ll)
                rows.append(
                    {
                        "run_id": self.run_id,
                        "unit_id": unit,
                        "channel": ch,
                        "t_lo_ns": lo,
                        "t_hi_ns": hi,
                        "count": len(tt),
                        "t_data": t_data,
                        "level_data": l_data,
                    }
                )
        return rows

    def _seed_open_windows(self) -> None:
        """On resume: the last window of each unit was written partial at the end of the previous
        segment; delete it and take its actuations back, so it is finished with the new ones."""
        from sqlalchemy import delete

        try:
            with self._conn.begin():
                for ch, unit in self.units.items():
                    if self.seg_start[ch] == 0:
                        continue
                    last = self._conn.execute(
                        select(func.max(s.Actuation.cycle)).where(
                            s.Actuation.unit_id == unit, s.Actuation.run_id == self.run_id
                        )
                    ).scalar()
                    if last is None:
                        continue
                    w = int(last) // self.window
                    self._conn.execute(
                        delete(s.Rollup).where(
                            s.Rollup.unit_id == unit, s.Rollup.run_id == self.run_id, s.Rollup.window_no >= w
                        )
                    )
                    rows = self.store._fetch_actuations(
                        self._conn,
                        [
                            s.Actuation.unit_id == unit,
                            s.Actuation.run_id == self.run_id,
                            s.Actuation.cycle >= w * self.window,
                        ],
                    )
                    self._rollups.seed(rows["unit_id"], rows)
        except DB_ERRORS as exc:
            raise _store_error("reopen the run", exc) from exc

    def close(self, end_reason: str, detail: str = "") -> None:
        """Final flush (partial rollup windows too), end the run, release the bench lease. Another
        program's write lock is waited out as in a final flush."""
        if self.closed:
            return
        try:
            self.flush(final=True)
            since = time.monotonic()
            while True:
                try:
                    self._end_run(end_reason, detail)
                    break
                except DB_ERRORS as exc:
                    if not _is_lock_wait(exc) or time.monotonic() - since >= STORE_WAIT_S:
                        raise
                    time.sleep(0.1)
        except DB_ERRORS as exc:
            raise _store_error("end the run", exc) from exc
        finally:
            self.closed = True
            self._let_go()

    def _end_run(self, end_reason: str, detail: str) -> None:
        with self._conn.begin():
            self._conn.execute(
                update(s.Run)
                .where(s.Run.id == self.run_id)
                .values(ended_at=self.store.now(), end_reason=end_reason, end_detail=detail)
            )
            self._conn.execute(
                update(s.Bench)
                .where(s.Bench.id == self.bench_id, s.Bench.lease_token == self.lease_token)
                .values(lease_token=None, lease_host=None, lease_pid=None, lease_until=None)
            )

    def _let_go(self) -> None:
        """Give the connection back to the pool as the engine made it (SQLite's own busy timeout)."""
        try:
            self._conn.rollback()
            if self._conn.dialect.name == "sqlite":
                self._conn.exec_driver_sql(f"PRAGMA busy_timeout={BUSY_TIMEOUT_MS}")
                self._conn.commit()
        except DB_ERRORS:
            pass
        try:
            self._conn.close()
        except SQLAlchemyError:
            pass

    def abandon(self) -> None:
        """Drop the connection without writing (after a store error); the lease runs out by itself."""
        self.closed = True
        self._let_go()
