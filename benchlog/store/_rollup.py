"""Rollups: per unit, kind and window of cycles, count / p50 / p95 / max / sum of each metric.

The recorder feeds actuations as they come; a window is written once an actuation of a later window
arrives for the same unit and kind (and at the end of a segment, partial). Percentiles use linear
interpolation between order statistics, the same definition as `numpy.percentile`'s default
("linear", Hyndman and Fan type 7), and are computed for all windows of a batch at once.
Actuations flagged INCOMPLETE, and NaN values, are left out of the counts.
"""

from __future__ import annotations

import numpy as np

from benchlog.analysis._types import INCOMPLETE

from ._schema import ROLLUP_METRICS

ROLLUP_QUANTILES = (0.50, 0.95)


def group_stats(group: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """For `values` (n, m) floats (NaN = missing) labelled by non-decreasing `group` ids 0..G-1, per group
    and column: counts of non-NaN values (G, m) and [p50, p95, max] (G, m, 3), NaN where the count is 0.

    The groups are laid out in a (G, longest group, m) block padded with NaN and sorted along the
    group axis (numpy sorts NaN last), so every percentile of every group and metric is one gather."""
    values = np.asarray(values, np.float64)
    if values.ndim == 1:
        values = values[:, None]
    n, m = values.shape
    if n == 0:
        return np.zeros((0, m), np.int64), np.zeros((0, m, 3))
    starts = np.flatnonzero(np.r_[True, group[1:] != group[:-1]])
    sizes = np.diff(np.append(starts, n))
    g = len(starts)
    pos = np.arange(n) - np.repeat(starts, sizes)
    block = np.full((g, int(sizes.max()), m), np.nan)
    block[np.repeat(np.arange(g), sizes), pos] = values
    block.sort(axis=1)
    counts = (~np.isnan(block)).sum(axis=1)  # (G, m)
    out = np.full((g, m, 3), np.nan)
    has = counts > 0
    last = np.maximum(counts - 1, 0)
    for j, q in enumerate(ROLLUP_QUANTILES):
        at = last * q
        lo = np.floor(at).astype(np.int64)
        hi = np.ceil(at).astype(np.int64)
        a = np.take_along_axis(block, lo[:, None, :], axis=1)[:, 0, :]
        b = np.take_along_axis(block, hi[:, None, :], axis=1)[:, 0, :]
        out[..., j] = np.where(has, a + (b - a) * (at - lo), np.nan)
    out[..., 2] = np.where(has, np.take_along_axis(block, last[:, None, :], axis=1)[:, 0, :], np.nan)
    return counts, out


class RollupKeeper:
    """Keeps the actuations of each (unit, kind)'s open window and emits finished windows.

    A window of a (unit, kind) is finished once an actuation of a later window of the same (unit,
    kind) has arrived; at the end (`final`) every open window is emitted as it is. Memory stays
    bounded by one window per unit and kind.
    """

    def __init__(self, window: int) -> None:
        if window < 1:
            raise ValueError("rollup window must be at least one cycle")
        self.window = window
        self._open: tuple[np.ndarray, ...] | None = None  # unit, kind, cycle, values (n, m)

    def pending(self) -> int:
        return 0 if self._open is None else len(self._open[0])

    @staticmethod
    def _columns(unit: np.ndarray, acts: np.ndarray) -> tuple[np.ndarray, ...]:
        keep = (acts["flags"] & INCOMPLETE) == 0
        unit = np.asarray(unit, np.int64)
        if not keep.all():
            acts, unit = acts[keep], unit[keep]
        values = np.empty((len(acts), len(ROLLUP_METRICS)))
        for j, metric in enumerate(ROLLUP_METRICS):
            values[:, j] = acts[metric]
        return unit, acts["kind"].astype(np.int64), acts["cycle"].astype(np.int64), values

    def _merge(self, cols: tuple[np.ndarray, ...]) -> tuple[np.ndarray, ...]:
        if self._open is None:
            return cols
        return tuple(np.concatenate([a, b]) for a, b in zip(self._open, cols, strict=True))

    def seed(self, unit: np.ndarray, acts: np.ndarray) -> None:
        """Put back the actuations of open windows (on resume)."""
        if len(acts):
            self._open = self._merge(self._columns(unit, acts))

    def add(self, unit: np.ndarray, acts: np.ndarray, *, final: bool = False) -> list[tuple]:
        """Feed actuations (any dtype with kind, cycle, flags and the metric fields) of units `unit`;
        returns rollup rows (unit_id, metric, kind, None, window_no, cycle_lo, cycle_hi, count, p50,
        p95, max, sum) of every finished window (sum 0.0 where count is 0); the caller fills in the
        run."""
        unit_a, kind, cycle, values = self._merge(self._columns(unit, acts))
        self._open = None
        if not len(unit_a):
            return []
        key = unit_a * 2 + kind
        win = cycle // self.window
        if final:
            done = np.ones(len(key), bool)
        else:
            order = np.argsort(key, kind="stable")
            ks, first = np.unique(key[order], return_index=True)
            top = np.maximum.reduceat(win[order], first)
            done = win < top[np.searchsorted(ks, key)]
            if not done.all():
                rest = ~done
                self._open = (unit_a[rest], kind[rest], cycle[rest], values[rest])
        if not done.any():
            return []
        key, win, cycle, values, unit_a, kind = (
            key[done],
            win[done],
            cycle[done],
            values[done],
            unit_a[done],
            kind[done],
        )
        order = np.argsort(key * (1 << 42) + cycle, kind="stable")  # by unit, kind, then cycle (< 2**42)
        key, win, cycle, values, unit_a, kind = (
            key[order],
            win[order],
            cycle[order],
            values[order],
            unit_a[order],
            kind[order],
        )
        new = np.ones(len(key), bool)
        new[1:] = (key[1:] != key[:-1]) | (win[1:] != win[:-1])
        group = np.cumsum(new) - 1
        starts = np.flatnonzero(new)
        ends = np.append(starts[1:], len(key)) - 1
        counts, stats = group_stats(group, values)
        sums = np.add.reduceat(np.where(np.isnan(values), 0.0, values), starts, axis=0)  # (G, m)
        unit_l, kind_l, win_l = unit_a[starts].tolist(), kind[starts].tolist(), win[starts].tolist()
        lo_l, hi_l = cycle[starts].tolist(), cycle[ends].tolist()
        counts_l, stats_l, sums_l = counts.tolist(), stats.tolist(), sums.tolist()
        result: list[tuple] = []
        for i in range(len(starts)):
            for j, metric in enumerate(ROLLUP_METRICS):
                n = counts_l[i][j]
                p50, p95, mx = stats_l[i][j] if n else (None, None, None)
                result.append(
                    (
                        unit_l[i],
                        metric,
                        kind_l[i],
                        None,
                        win_l[i],
                        lo_l[i],
                        hi_l[i],
                        n,
                        p50,
                        p95,
                        mx,
                        sums_l[i][j],
                    )
                )
        return result
