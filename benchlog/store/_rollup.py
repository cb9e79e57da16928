"""Rollups: per unit, kind and window of cycles, count / p50 / p95 / max of each metric.

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
    """For `values` (float, NaN = missing) labelled by non-decreasing `group` ids, per group:
    (unique group ids, counts of non-NaN values, matrix [p50, p95, max] with NaN where count is 0)."""
    if len(group) == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros((0, 3))
    ids, starts = np.unique(group, return_index=True)
    # sort within each group; NaN sorts last (numpy sorts NaN to the end)
    order = np.lexsort((values, group))
    v = values[order]
    valid = ~np.isnan(v)
    counts = np.add.reduceat(valid.astype(np.int64), starts)
    out = np.full((len(ids), 3), np.nan)
    has = counts > 0
    for j, q in enumerate(ROLLUP_QUANTILES):
        pos = (counts - 1) * q
        lo = np.floor(pos).astype(np.int64)
        hi = np.ceil(pos).astype(np.int64)
        frac = pos - lo
        s = starts[has]
        a = v[s + lo[has]]
        b = v[s + hi[has]]
        out[has, j] = a + (b - a) * frac[has]
    out[has, 2] = v[starts[has] + counts[has] - 1]
    return ids, counts, out


class RollupKeeper:
    """Keeps, per (unit, kind), the actuations of the window still open, and emits finished windows."""

    def __init__(self, window: int) -> None:
        if window < 1:
            raise ValueError("rollup window must be at least one cycle")
        self.window = window
        self._open: dict[tuple[int, int], np.ndarray] = {}  # (unit, kind) -> rows of STORE dtype

    def pending(self) -> int:
        return sum(len(a) for a in self._open.values())

    def seed(self, unit_id: int, kind: int, rows: np.ndarray) -> None:
        """Put back the actuations of an open window (on resume)."""
        if len(rows):
            self._open[(unit_id, kind)] = rows

    def add(self, rows: np.ndarray, *, final: bool = False) -> list[tuple]:
        """Feed stored-form actuations (fields unit_id, kind, cycle, flags and the metrics); returns
        rollup rows (unit_id, metric, kind, run_id, window_no, cycle_lo, cycle_hi, count, p50, p95, max)
        for every window that is finished (all open windows when `final`); `run_id` is filled by the
        caller."""
        out: list[tuple] = []
        keys = set(self._open)
        if len(rows):
            keys.update(zip(rows["unit_id"].tolist(), rows["kind"].tolist(), strict=True))
        for key in sorted(keys):
            unit_id, kind = key
            new = rows[(rows["unit_id"] == unit_id) & (rows["kind"] == kind)] if len(rows) else rows
            prev = self._open.pop(key, None)
            both = new if prev is None else (np.concatenate([prev, new]) if len(new) else prev)
            if not len(both):
                continue
            win = both["cycle"] // self.window
            if final:
                done_mask = np.ones(len(both), bool)
            else:
                done_mask = win < win.max()
                self._open[key] = both[~done_mask]
            done = both[done_mask]
            if len(done):
                out.extend(self._stats(unit_id, kind, done))
        return out

    def _stats(self, unit_id: int, kind: int, rows: np.ndarray) -> list[tuple]:
        rows = rows[(rows["flags"] & INCOMPLETE) == 0]
        if not len(rows):
            return []
        order = np.argsort(rows["cycle"], kind="stable")
        rows = rows[order]
        win = rows["cycle"] // self.window
        ids, starts = np.unique(win, return_index=True)
        ends = np.append(starts[1:], len(win)) - 1
        cyc_lo = rows["cycle"][starts].tolist()
        cyc_hi = rows["cycle"][ends].tolist()
        result: list[tuple] = []
        for metric in ROLLUP_METRICS:
            _, counts, stats = group_stats(win, rows[metric].astype(np.float64))
            stats_l = stats.tolist()
            for i, w in enumerate(ids.tolist()):
                n = int(counts[i])
                p50, p95, mx = stats_l[i] if n else (None, None, None)
                result.append((unit_id, metric, kind, None, w, cyc_lo[i], cyc_hi[i], n, p50, p95, mx))
        return result
