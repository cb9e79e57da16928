"""Per-channel summaries of actuations (what `benchlog analyze` prints), kept up batch by batch.

`Summaries.add(rows)` takes actuations as they are measured and keeps, per channel, counts and, for
each measured quantity, every distinct value with how often it came: a percentile from those is exactly
the one numpy computes from all the values (linear interpolation, `numpy.percentile`'s default), and
memory is bounded by how many distinct values the tick resolution allows within the windows measured,
not by how long the recording ran. `summarize(table)` is the same over one table.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np

from benchlog.analysis._types import BREAK, INCOMPLETE, MAKE, MISSED, NO_CHANGE, STUCK

if TYPE_CHECKING:
    from benchlog.analysis._spec import PartSpec, UnitFigures

# values buffered (or as many as there are distinct ones) before they are folded: sorting them is most of
# a summary's cost, and fewer, larger folds sort less often (21 ms against 25 ms for 1 M edges' 143,000
# actuations at 1 << 14 against 1 << 12; at most 128 KiB a series)
COMPACT_AT = 1 << 14


class ValueCounts:
    """A multiset of float values: sorted distinct values and their counts."""

    __slots__ = ("values", "counts", "_buffer", "_buffered")

    def __init__(self) -> None:
        self.values = np.zeros(0, np.float64)
        self.counts = np.zeros(0, np.int64)
        self._buffer: list[np.ndarray] = []
        self._buffered = 0

    def add(self, values: np.ndarray) -> None:
        """Add values (NaN is left out: the quantity does not apply)."""
        values = values[~np.isnan(values)]
        if len(values):
            self._buffer.append(values)
            self._buffered += len(values)
            if self._buffered >= max(COMPACT_AT, len(self.values)):
                self._compact()

    def _compact(self) -> None:
        if not self._buffer:
            return
        new, counts = np.unique(np.concatenate(self._buffer), return_counts=True)
        self._buffer, self._buffered = [], 0
        if len(self.values):
            # two sorted runs of distinct values: a stable sort merges them in one pass (timsort)
            both = np.concatenate((self.values, new))
            order = np.argsort(both, kind="stable")
            both = both[order]
            weights = np.concatenate((self.counts, counts))[order]
            first = np.ones(len(both), bool)
            np.not_equal(both[1:], both[:-1], out=first[1:])
            at = np.flatnonzero(first)
            new, counts = both[at], np.add.reduceat(weights, at)
        self.values, self.counts = new, counts

    def __len__(self) -> int:
        return int(self.counts.sum()) + self._buffered

    def _unfolded(self) -> np.ndarray | None:
        """Every value, as one array, while none has been folded yet (a short recording's case), else
        None: its order statistics come from a partition, not a sort."""
        if len(self.values) or not self._buffer:
            return None
        if len(self._buffer) > 1:
            self._buffer = [np.concatenate(self._buffer)]
        return self._buffer[0]

    def percentile(self, q: float) -> float:
        """`numpy.percentile(all values, q)`, exactly: the same index arithmetic and interpolation
        (numpy's 'linear' method: virtual index (n - 1) * q / 100, then a lerp of its two neighbours)."""
        return self._percentiles([q])[0]

    def _percentiles(self, qs: list[float]) -> list[float]:
        whole = self._unfolded()
        if whole is None:
            self._compact()
            cum = np.cumsum(self.counts)
            n = int(cum[-1])
        else:
            n = len(whole)
        at = [_neighbours(n, q) for q in qs]
        ranks = [r for lo, hi, _ in at for r in (lo, hi)]
        if whole is None:
            ranked = self.values[np.searchsorted(cum, ranks, "right")]
        else:  # the values of those ranks, by one partition (numpy.percentile's own way)
            ranked = np.partition(whole, sorted(set(ranks)))[ranks]
        return [_lerp(ranked[2 * i], ranked[2 * i + 1], gamma) for i, (_, _, gamma) in enumerate(at)]

    def dist(self) -> dict[str, float | None]:
        n = len(self)
        if not n:
            return {"n": 0, "p50": None, "p95": None, "max": None}
        p50, p95 = self._percentiles([50, 95])
        whole = self._unfolded()
        top = float(self.values[-1]) if whole is None else float(whole.max())
        return {"n": n, "p50": p50, "p95": p95, "max": top}


def _neighbours(n: int, q: float) -> tuple[int, int, float]:
    """numpy's 'linear' percentile of n values: the ranks of the two values it interpolates and the
    weight of the upper one (virtual index (n - 1) * q / 100)."""
    virtual = (n - 1) * np.true_divide(q, 100)
    below = np.floor(virtual)
    if virtual >= n - 1:
        lo = hi = n - 1
    elif virtual < 0:
        lo = hi = 0
    else:
        lo, hi = int(below), int(below) + 1
    return lo, hi, virtual - below


def _lerp(a: float, b: float, gamma: float) -> float:
    """numpy's interpolation between neighbours (from the upper one when gamma >= 0.5)."""
    diff = b - a
    if gamma >= 0.5:
        return float(b - diff * (1 - gamma))
    return float(a + diff * gamma)


# (column, rows, leave out missed/stuck): the quantities a summary or a verdict needs
_MAKE, _BREAK, _OPERATE, _RELEASE, _ALL = "make", "break", "operate", "release", "all"


class _Channel:
    def __init__(self) -> None:
        self.actuations = self.makes = self.breaks = 0
        self.max_cycle = -1
        self.incomplete = self.missed = self.stuck = self.no_change = 0
        self.glitches = self.chatter = 0
        self.complete = 0
        self.min_good_cycle: int | None = None
        self.max_good_cycle: int | None = None
        self.missed_good = 0
        self.first_missed: tuple[bool, int] | None = None
        self.series: dict[tuple[str, str, bool], ValueCounts] = {}

    def values(self, column: str, which: str, drop_missed: bool = False) -> ValueCounts:
        key = (column, which, drop_missed)
        v = self.series.get(key)
        if v is None:
            v = self.series[key] = ValueCounts()
        return v


def _select(rows, which: str) -> np.ndarray:
    if which == _MAKE:
        return rows["kind"] == MAKE
    if which == _BREAK:
        return rows["kind"] == BREAK
    if which == _OPERATE:
        return rows["drive_level"] == 1
    if which == _RELEASE:
        return rows["drive_level"] == 0
    return np.ones(len(rows["kind"]), bool)


class Summaries:
    """Per-channel summaries kept up as actuations arrive (see the module doc); `result()` gives what
    `summarize` gives for all of them at once."""

    def __init__(self, spec: PartSpec | None = None) -> None:
        self.spec = spec
        self._channels: dict[int, _Channel] = {}
        self._wanted = [
            ("bounce_us", _MAKE, False),
            ("bounce_us", _BREAK, False),
            ("bounce_count", _MAKE, True),
            ("bounce_count", _BREAK, True),
            ("transit_us", _OPERATE, False),
            ("transit_us", _RELEASE, False),
            ("transfer_us", _ALL, False),
        ]
        if spec is not None:
            from benchlog.analysis._spec import METRICS

            for lim in spec.limits:
                column, which, _ = METRICS[lim.metric]
                key = (column, which, False)
                if key not in self._wanted:
                    self._wanted.append(key)

    def add(self, actuations: np.ndarray) -> None:
        if not len(actuations):
            return
        # the columns used, each read once and grouped by channel (one stable sort: rows keep their
        # order within a channel), not a copy of whole rows per channel
        names = {"channel", "kind", "flags", "cycle", "glitches", "chatter", "drive_level"}
        names.update(column for column, _, _ in self._wanted)
        channels = actuations["channel"]
        runs = [0, *(np.flatnonzero(channels[1:] != channels[:-1]) + 1).tolist()]
        if len(runs) == len(set(channels[runs].tolist())):  # each channel's rows together already
            cols = {name: actuations[name] for name in names}
            bounds = [*runs, len(actuations)]
        else:
            order = np.argsort(channels, kind="stable")
            cols = {name: actuations[name][order] for name in names}
            bounds = [0, *(np.flatnonzero(np.diff(cols["channel"])) + 1).tolist(), len(actuations)]
        for a, b in zip(bounds[:-1], bounds[1:], strict=True):
            c = int(cols["channel"][a])
            ch = self._channels.get(c)
            if ch is None:
                ch = self._channels[c] = _Channel()
            self._add(ch, {name: col[a:b] for name, col in cols.items()})

    def _add(self, ch: _Channel, rows: dict[str, np.ndarray]) -> None:
        flags = rows["flags"]
        kind = rows["kind"]
        ch.actuations += len(flags)
        ch.makes += int(np.count_nonzero(kind == MAKE))
        ch.breaks += int(np.count_nonzero(kind == BREAK))
        ch.max_cycle = max(ch.max_cycle, int(rows["cycle"].max()))
        ch.incomplete += int(np.count_nonzero(flags & INCOMPLETE))
        ch.missed += int(np.count_nonzero(flags & MISSED))
        ch.stuck += int(np.count_nonzero(flags & STUCK))
        ch.no_change += int(np.count_nonzero(flags & NO_CHANGE))
        is_good = (flags & (INCOMPLETE | NO_CHANGE)) == 0
        n_good = int(np.count_nonzero(is_good))
        if not n_good:
            return
        good = rows if n_good == len(flags) else {name: col[is_good] for name, col in rows.items()}
        ch.complete += n_good
        ch.glitches += int(good["glitches"].clip(min=0).sum())
        ch.chatter += int(good["chatter"].clip(min=0).sum())
        lo, hi = int(good["cycle"].min()), int(good["cycle"].max())
        ch.min_good_cycle = lo if ch.min_good_cycle is None else min(ch.min_good_cycle, lo)
        ch.max_good_cycle = hi if ch.max_good_cycle is None else max(ch.max_good_cycle, hi)
        failed = (good["flags"] & (MISSED | STUCK)) != 0
        n_failed = int(np.count_nonzero(failed))
        if n_failed and ch.first_missed is None:
            first = int(np.argmax(failed))
            ch.first_missed = (bool(good["flags"][first] & STUCK), int(good["cycle"][first]))
        ch.missed_good += n_failed
        selected: dict[tuple[str, bool], np.ndarray] = {}  # each selection made once
        for column, which, drop_missed in self._wanted:
            sel = selected.get((which, drop_missed))
            if sel is None:
                sel = selected.get((which, False))
                if sel is None:
                    sel = selected[which, False] = _select(good, which)
                if drop_missed:
                    sel = selected[which, True] = sel & ~failed
            ch.values(column, which, drop_missed).add(good[column][sel].astype(np.float64, copy=False))

    def result(self) -> list[dict[str, Any]]:
        """One dict per channel: counts, p50/p95/max (us) of bounce and transit times, and the verdict."""
        out = []
        for c in sorted(self._channels):
            ch = self._channels[c]
            entry: dict[str, Any] = {
                "channel": c,
                "actuations": ch.actuations,
                "makes": ch.makes,
                "breaks": ch.breaks,
                "cycles": ch.max_cycle + 1,
                "incomplete": ch.incomplete,
                "missed": ch.missed,
                "stuck": ch.stuck,
                "no_change": ch.no_change,
                "glitches": ch.glitches,
                "chatter_events": ch.chatter,
                "make_bounce_us": ch.values("bounce_us", _MAKE).dist(),
                "break_bounce_us": ch.values("bounce_us", _BREAK).dist(),
                # a missed or stuck actuation has no bounce to count, as it has no bounce time
                "make_bounce_count": ch.values("bounce_count", _MAKE, True).dist(),
                "break_bounce_count": ch.values("bounce_count", _BREAK, True).dist(),
                "operate_us": ch.values("transit_us", _OPERATE).dist(),
                "release_us": ch.values("transit_us", _RELEASE).dist(),
                "transfer_us": ch.values("transfer_us", _ALL).dist(),
            }
            if self.spec is not None:
                from benchlog.analysis._spec import VERDICT_NAMES, verdict_of

                verdict, reason = verdict_of(self._figures(ch), self.spec)
                entry["verdict"] = VERDICT_NAMES[verdict]
                entry["reason"] = reason
            out.append(entry)
        return out

    def _figures(self, ch: _Channel) -> UnitFigures:
        from benchlog.analysis._spec import UnitFigures

        def stat(column: str, which: str, percentile: float) -> float | None:
            v = ch.values(column, which)
            return v.percentile(percentile) if len(v) else None

        cycles = 0 if ch.min_good_cycle is None else ch.max_good_cycle - ch.min_good_cycle + 1
        return UnitFigures(ch.complete, ch.missed_good, ch.first_missed, cycles, ch.chatter, stat)


def summarize(actuations: np.ndarray, spec: PartSpec | None = None) -> list[dict[str, Any]]:
    """One dict per channel: counts, p50/p95/max (us) of bounce and transit times, and the verdict."""
    s = Summaries(spec)
    s.add(actuations)
    return s.result()
