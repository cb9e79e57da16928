"""Distribution summaries: what qualification, reports and the population views read instead of rows.

For every run, unit, *series* and window of `SUMMARY_WINDOW` life cycles the store keeps the exact
count, sum, sum of squares, minimum and maximum of the values, and a histogram with exact counts on a
fixed grid of bins shared by every summary, so summaries merge exactly (add the counts of equal bins)
across windows, runs, units and lots.

A series is a selection of actuations and one column:

- `make.<column>` / `break.<column>`: actuations of that kind;
- `operate.transit_us` / `release.transit_us`: the actuation a drive-on (off) started;
- `cycle.chatter`: the chatter of both actuations of one cycle added together, one value per cycle.

Only *measured* actuations count: those flagged INCOMPLETE, MISSED, STUCK or NO_CHANGE are left out
(failures are in the life table), and so are NaN values.

Bins. Integer columns (counts) have one bin per integer: exact. Time columns (us) have
`BINS_PER_OCTAVE` = 128 log-spaced bins per doubling of the magnitude, with 0 in a bin of its own and
negative values mirrored; a bin stands for its geometric middle, so a value is represented to within
`RESOLUTION` (2^(1/256) - 1, 0.271 %) of itself. Values below 2^-20 us (about 1 fs) share the lowest
bin. Percentiles read from the histogram are therefore within 0.271 % of the percentiles of the raw
values (linear interpolation between order statistics, numpy's default, is monotonic in each value);
counts, sums, minima and maxima are exact.
"""

from __future__ import annotations

import zlib
from dataclasses import dataclass

import numpy as np

from benchlog.analysis._types import BREAK, INCOMPLETE, MAKE, MISSED, NO_CHANGE, STUCK

__all__ = [
    "BINS_PER_OCTAVE",
    "RESOLUTION",
    "SERIES",
    "SUMMARY_WINDOW",
    "SeriesSummary",
    "SummaryKeeper",
    "bin_values",
    "bin_of",
    "summarise",
    "weighted_percentile",
]

BINS_PER_OCTAVE = 128
_LOG2_FLOOR = -20
RESOLUTION = 2.0 ** (1.0 / (2 * BINS_PER_OCTAVE)) - 1.0
SUMMARY_WINDOW = 1_000
NOT_MEASURED = INCOMPLETE | MISSED | STUCK | NO_CHANGE

_INTEGER_COLUMNS = frozenset({"bounce_count", "chatter", "glitches"})
_KIND_COLUMNS = ("transit_us", "bounce_us", "bounce_count", "longest_gap_us", "chatter")

# series name -> (selection, column)
SERIES: dict[str, tuple[str, str]] = {
    **{f"{sel}.{col}": (sel, col) for sel in ("make", "break") for col in _KIND_COLUMNS},
    "operate.transit_us": ("operate", "transit_us"),
    "release.transit_us": ("release", "transit_us"),
    "cycle.chatter": ("cycle", "chatter"),
}


def is_integer(series: str) -> bool:
    return SERIES[series][1] in _INTEGER_COLUMNS


def bin_of(values: np.ndarray, integer: bool) -> np.ndarray:
    """The bin of each finite value (int64)."""
    v = np.asarray(values, np.float64)
    if integer:
        return np.rint(v).astype(np.int64)
    mag = np.abs(v)
    with np.errstate(divide="ignore"):
        k = np.floor((np.log2(np.maximum(mag, 2.0**_LOG2_FLOOR)) - _LOG2_FLOOR) * BINS_PER_OCTAVE)
    b = k.astype(np.int64) + 1
    b[mag == 0] = 0
    return np.where(v < 0, -b, b)


def bin_values(bins: np.ndarray, integer: bool) -> np.ndarray:
    """The value each bin stands for (its geometric middle; the integer itself for counts)."""
    b = np.asarray(bins, np.int64)
    if integer:
        return b.astype(np.float64)
    mag = np.exp2((np.abs(b) - 1 + 0.5) / BINS_PER_OCTAVE + _LOG2_FLOOR)
    return np.where(b == 0, 0.0, np.sign(b) * mag)


def _pack(a: np.ndarray) -> bytes:
    return zlib.compress(np.ascontiguousarray(a, "<i8").tobytes(), 1)


def unpack(blob: bytes) -> np.ndarray:
    return np.frombuffer(zlib.decompress(blob), "<i8").astype(np.int64)


def weighted_percentile(v: np.ndarray, w: np.ndarray, percentile: float) -> float:
    """numpy's default (linear) percentile of sorted values `v`, each repeated `w` times."""
    cum = np.cumsum(w)
    h = (cum[-1] - 1.0) * percentile / 100.0
    lo, hi = np.floor(h), np.ceil(h)
    a = v[min(int(np.searchsorted(cum, lo, side="right")), len(v) - 1)]
    b = v[min(int(np.searchsorted(cum, hi, side="right")), len(v) - 1)]
    return float(a + (h - lo) * (b - a))


@dataclass
class SeriesSummary:
    """One series of a set of units, merged: per unit the exact moments, and the histogram as three
    aligned arrays (unit id, bin, count), sorted by unit then bin."""

    series: str
    unit_id: np.ndarray  # per unit (sorted)
    count: np.ndarray
    sum: np.ndarray
    sumsq: np.ndarray
    min: np.ndarray
    max: np.ndarray
    bin_unit: np.ndarray  # per occupied (unit, bin)
    bins: np.ndarray
    bin_count: np.ndarray

    @property
    def integer(self) -> bool:
        return is_integer(self.series)

    def values(self) -> np.ndarray:
        """The value each occupied bin stands for, kept inside its unit's exact minimum and maximum."""
        v = bin_values(self.bins, self.integer)
        at = np.searchsorted(self.unit_id, self.bin_unit)
        return np.clip(v, self.min[at], self.max[at])


class _Merger:
    """Adds up (unit, bin, count) triples and per-unit moments, compacting as it goes (flat memory)."""

    def __init__(self, series: str) -> None:
        self.series = series
        self.parts: list[tuple[np.ndarray, ...]] = []
        self.size = 0
        self.moments: dict[int, list[float]] = {}

    def add(self, unit: int, bins, counts, count, total, sumsq, lo, hi) -> None:
        m = self.moments.get(unit)
        if m is None:
            self.moments[unit] = [count, total, sumsq, lo, hi]
        else:
            m[0] += count
            m[1] += total
            m[2] += sumsq
            m[3] = min(m[3], lo)
            m[4] = max(m[4], hi)
        self.parts.append((np.full(len(bins), unit, np.int64), bins, counts))
        self.size += len(bins)
        if self.size > 100_000:
            self._compact()

    def _compact(self) -> None:
        if not self.parts:
            return
        u = np.concatenate([p[0] for p in self.parts])
        b = np.concatenate([p[1] for p in self.parts])
        c = np.concatenate([p[2] for p in self.parts])
        order = np.lexsort((b, u))
        u, b, c = u[order], b[order], c[order]
        new = np.r_[True, (u[1:] != u[:-1]) | (b[1:] != b[:-1])] if len(u) else np.zeros(0, bool)
        starts = np.flatnonzero(new)
        self.parts = [(u[starts], b[starts], np.add.reduceat(c, starts) if len(c) else c)]
        self.size = len(starts)

    def result(self) -> SeriesSummary:
        self._compact()
        units = np.array(sorted(self.moments), np.int64)
        mom = np.array([self.moments[int(u)] for u in units], np.float64).reshape(len(units), 5)
        u, b, c = self.parts[0] if self.parts else (np.zeros(0, np.int64),) * 3
        return SeriesSummary(
            self.series,
            units,
            mom[:, 0].astype(np.int64),
            mom[:, 1],
            mom[:, 2],
            mom[:, 3],
            mom[:, 4],
            u,
            b,
            c.astype(np.int64),
        )


def merge_rows(rows) -> dict[str, SeriesSummary]:
    """Merge stored summary rows (unit_id, series, count, sum, sumsq, min, max, bins, counts), read
    as an iterator, into one SeriesSummary per series."""
    mergers: dict[str, _Merger] = {}
    for unit, series, count, total, sumsq, lo, hi, bins, counts in rows:
        if series not in SERIES:
            continue
        m = mergers.get(series)
        if m is None:
            m = mergers[series] = _Merger(series)
        m.add(int(unit), unpack(bins), unpack(counts), int(count), float(total), float(sumsq), lo, hi)
    return {k: m.result() for k, m in mergers.items()}


# -- building summaries from actuations -----------------------------------------------------------


def _selections(acts: np.ndarray) -> dict[str, np.ndarray]:
    ok = (acts["flags"] & NOT_MEASURED) == 0
    return {
        "make": ok & (acts["kind"] == MAKE),
        "break": ok & (acts["kind"] == BREAK),
        "operate": ok & (acts["drive_level"] == 1),
        "release": ok & (acts["drive_level"] == 0),
    }


def summarise(series: str, unit: np.ndarray, window: np.ndarray, values: np.ndarray) -> list[tuple]:
    """Summaries of one series for a batch: one tuple (unit, window, bins, counts, count, sum, sumsq,
    min, max) per (unit, window) present. NaN values are left out."""
    values = np.asarray(values, np.float64)
    keep = np.isfinite(values)
    unit, window, values = np.asarray(unit)[keep], np.asarray(window)[keep], values[keep]
    if not len(values):
        return []
    bins = bin_of(values, is_integer(series))
    order = np.lexsort((bins, window, unit))
    unit, window, values, bins = unit[order], window[order], values[order], bins[order]
    group = np.r_[True, (unit[1:] != unit[:-1]) | (window[1:] != window[:-1])]
    gstart = np.flatnonzero(group)
    cell = group | np.r_[True, bins[1:] != bins[:-1]]
    cstart = np.flatnonzero(cell)
    ccount = np.diff(np.append(cstart, len(bins)))
    cgroup = np.cumsum(group)[cstart] - 1  # group of each cell
    cbounds = np.searchsorted(cgroup, np.arange(len(gstart) + 1))
    count = np.diff(np.append(gstart, len(values)))
    with np.errstate(over="ignore"):  # extreme values: an infinite sum of squares, still a valid row
        total = np.add.reduceat(values, gstart)
        sumsq = np.add.reduceat(values * values, gstart)
    lo = np.minimum.reduceat(values, gstart)
    hi = np.maximum.reduceat(values, gstart)
    cb = bins[cstart]
    return [
        (
            int(unit[g]),
            int(window[g]),
            cb[cbounds[i] : cbounds[i + 1]],
            ccount[cbounds[i] : cbounds[i + 1]].astype(np.int64),
            int(count[i]),
            float(total[i]),
            float(sumsq[i]),
            float(lo[i]),
            float(hi[i]),
        )
        for i, g in enumerate(gstart.tolist())
    ]


class _Open:
    """The accumulated summary of one (unit, series, window)."""

    __slots__ = ("bins", "counts", "count", "sum", "sumsq", "min", "max")

    def __init__(self) -> None:
        self.bins = np.zeros(0, np.int64)
        self.counts = np.zeros(0, np.int64)
        self.count = 0
        self.sum = 0.0
        self.sumsq = 0.0
        self.min = np.inf
        self.max = -np.inf

    def merge(self, bins, counts, count, total, sumsq, lo, hi) -> None:
        b = np.concatenate((self.bins, bins))
        c = np.concatenate((self.counts, counts))
        ub, inv = np.unique(b, return_inverse=True)
        self.bins, self.counts = ub, np.bincount(inv, c, len(ub)).astype(np.int64)
        self.count += int(count)
        self.sum += float(total)
        self.sumsq += float(sumsq)
        self.min = min(self.min, float(lo))
        self.max = max(self.max, float(hi))


class SummaryKeeper:
    """Keeps the summaries of one run as the recorder writes it.

    `add(unit, acts)` takes actuations in life cycles (in cycle order per unit, as the analysis gives
    them); `write(conn, final)` stores every window touched since the last write (replacing its row),
    in the caller's transaction. A window already in the store (a resumed run) is read back and
    merged on first touch. The chatter of a cycle is held back until a later cycle of the unit arrives
    (or `final`), so a cycle split between two batches is still one value. Memory: the open windows
    only (a window is dropped once a later one of its unit has been written).
    """

    def __init__(self, run_id: int, window: int = SUMMARY_WINDOW) -> None:
        self.run_id = run_id
        self.window = window
        self._open: dict[tuple[int, str, int], _Open] = {}
        self._dirty: set[tuple[int, str, int]] = set()
        self._known: set[tuple[int, str, int]] = set()  # keys whose stored row was merged in
        # windows that can have a stored row not in `_open`: up to the run's last stored window when
        # this keeper began (a resumed run), and those of a unit up to the last it wrote (a window
        # written and let go); windows past both are new, and no query looks for their rows
        self._stored_before: int | None = None
        self._written_upto: dict[int, int] = {}
        self._held = (np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0, np.float64))
        self._latest: dict[int, int] = {}

    def add(self, unit: np.ndarray, acts: np.ndarray, *, final: bool = False) -> None:
        unit = np.asarray(unit, np.int64)
        cycle = acts["cycle"].astype(np.int64)
        win = cycle // self.window
        sel = _selections(acts)
        for name, (which, column) in SERIES.items():
            if which == "cycle":
                continue
            m = sel[which]
            if m.any():
                self._merge(name, summarise(name, unit[m], win[m], acts[column][m]))
        ok = (acts["flags"] & NOT_MEASURED) == 0
        self._add_cycles(unit[ok], cycle[ok], acts["chatter"][ok].astype(np.float64), final)
        if len(unit):
            for u, w in zip(*_last_window(unit, win), strict=True):
                self._latest[u] = max(self._latest.get(u, w), w)

    def _add_cycles(self, unit, cycle, chatter, final: bool) -> None:
        hu, hc, hv = self._held
        unit, cycle, chatter = np.r_[hu, unit], np.r_[hc, cycle], np.r_[hv, chatter]
        keep = np.isfinite(chatter)
        unit, cycle, chatter = unit[keep], cycle[keep], chatter[keep]
        if not len(unit):
            self._held = (unit, cycle, chatter)
            return
        order = np.lexsort((cycle, unit))
        unit, cycle, chatter = unit[order], cycle[order], chatter[order]
        start = np.flatnonzero(np.r_[True, (unit[1:] != unit[:-1]) | (cycle[1:] != cycle[:-1])])
        cu, cc, cv = unit[start], cycle[start], np.add.reduceat(chatter, start)
        if final:
            done = np.ones(len(cu), bool)
        else:
            done = np.r_[cu[1:] == cu[:-1], False]  # the last cycle of each unit waits
        held = np.repeat(~done, np.diff(np.append(start, len(unit))))
        self._held = (unit[held], cycle[held], chatter[held])
        if done.any():
            self._merge(
                "cycle.chatter", summarise("cycle.chatter", cu[done], cc[done] // self.window, cv[done])
            )

    def _merge(self, series: str, parts: list[tuple]) -> None:
        for u, w, bins, counts, count, total, sumsq, lo, hi in parts:
            key = (u, series, w)
            o = self._open.get(key)
            if o is None:
                o = self._open[key] = _Open()
            o.merge(bins, counts, count, total, sumsq, lo, hi)
            self._dirty.add(key)

    def write(self, conn, *, final: bool = False) -> int:
        """Store every window touched since the last committed write; returns how many rows were written."""
        from sqlalchemy import and_, bindparam, delete, func, insert, select

        from . import _schema as s

        if final and len(self._held[0]):
            hu, hc, hv = self._held
            self._held = (np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0, np.float64))
            self._add_cycles(hu, hc, hv, True)
        if not self._dirty:
            return 0
        t = s.Summary.__table__.c
        if self._stored_before is None:
            last = conn.execute(select(func.max(t.window_no)).where(t.run_id == self.run_id)).scalar()
            self._stored_before = -1 if last is None else int(last)
        fresh = self._dirty - self._known
        lookup = {k for k in fresh if k[2] <= max(self._stored_before, self._written_upto.get(k[0], -1))}
        if lookup:
            windows = sorted({k[2] for k in lookup})
            old = conn.execute(
                select(
                    t.unit_id, t.series, t.window_no, t.count, t.sum, t.sumsq, t.min, t.max, t.bins, t.counts
                ).where(t.run_id == self.run_id, t.window_no.in_(windows))
            ).all()
            for r in old:
                key = (int(r.unit_id), r.series, int(r.window_no))
                if key in lookup:
                    self._open[key].merge(
                        unpack(r.bins), unpack(r.counts), r.count, r.sum, r.sumsq, r.min, r.max
                    )
        self._known |= fresh
        keys = sorted(self._dirty)
        for u, _, w in keys:
            if w > self._written_upto.get(u, -1):
                self._written_upto[u] = w
        names = (
            "run_id",
            "unit_id",
            "series",
            "window_no",
            "count",
            "sum",
            "sumsq",
            "min",
            "max",
            "bins",
            "counts",
        )
        rows = [
            (self.run_id, u, sr, w, o.count, o.sum, o.sumsq, o.min, o.max, _pack(o.bins), _pack(o.counts))
            for (u, sr, w), o in ((key, self._open[key]) for key in keys)
        ]
        if conn.dialect.name == "sqlite":
            # through the driver, a row replaced by primary key in one statement: none of the SQL
            # layer's work per row, and no DELETE before it
            marks = ", ".join("?" * len(names))
            conn.connection.driver_connection.cursor().executemany(
                f"INSERT OR REPLACE INTO summaries ({', '.join(names)}) VALUES ({marks})", rows
            )
            return len(rows)
        conn.execute(
            delete(s.Summary).where(
                and_(
                    t.run_id == self.run_id,
                    t.unit_id == bindparam("u"),
                    t.series == bindparam("sr"),
                    t.window_no == bindparam("w"),
                )
            ),
            [{"u": u, "sr": sr, "w": w} for u, sr, w in keys],
        )
        conn.execute(insert(s.Summary), [dict(zip(names, r, strict=True)) for r in rows])
        return len(rows)

    def committed(self) -> None:
        """The transaction `write` wrote in has committed: its windows are clean, and those a unit has
        moved past are let go. (Until then they stay dirty: a put-off commit writes them again.)"""
        self._dirty.clear()
        for key in [k for k in self._open if k[2] < self._latest.get(k[0], k[2])]:
            del self._open[key]
            self._known.discard(key)


def _last_window(unit: np.ndarray, win: np.ndarray) -> tuple[list[int], list[int]]:
    order = np.argsort(unit, kind="stable")
    us, first = np.unique(unit[order], return_index=True)
    return us.tolist(), np.maximum.reduceat(win[order], first).tolist()
