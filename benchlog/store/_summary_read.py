"""Reading the distribution summaries (`Store.summaries`): merged per unit and series, streamed."""

from __future__ import annotations

from numbers import Integral

import numpy as np
from sqlalchemy import select

from . import _schema as s
from ._summary import SERIES, SeriesSummary, bin_values, is_integer, merge_rows, unpack

__all__ = ["SummaryReadAPI"]

_FETCH = 2000


def _ints(values) -> list[int]:
    return [int(v) for v in values]


class SummaryReadAPI:
    def summaries(
        self,
        *,
        units: list[int] | None = None,
        lots: list[int] | None = None,
        parts: list[int | str] | None = None,
        runs: list[int] | None = None,
        series: list[str] | None = None,
    ) -> dict[str, SeriesSummary]:
        """Every stored window of the selected units merged into one SeriesSummary per series (only
        series with values appear). Filters combine with AND. Rows are read a few thousand at a time
        and merged as they come, so memory depends on units and bins, not on the store's size."""
        t = s.Summary.__table__.c
        q = select(t.unit_id, t.series, t.count, t.sum, t.sumsq, t.min, t.max, t.bins, t.counts)
        if units is not None:
            q = q.where(t.unit_id.in_(_ints(units)))
        if runs is not None:
            q = q.where(t.run_id.in_(_ints(runs)))
        if series is not None:
            q = q.where(t.series.in_([x for x in series if x in SERIES]))
        if lots is not None or parts is not None:
            uq = select(s.Unit.id).join(s.Lot)
            if lots is not None:
                uq = uq.where(s.Lot.id.in_(_ints(lots)))
            if parts is not None:
                ids = [int(p) for p in parts if isinstance(p, Integral)]
                names = [p for p in parts if isinstance(p, str)]
                uq = uq.join(s.Part).where(s.Part.id.in_(ids) | s.Part.part_number.in_(names))
            q = q.where(t.unit_id.in_(uq.scalar_subquery()))
        with self._read("summaries") as c:  # type: ignore[attr-defined]
            result = c.execute(q.execution_options(yield_per=_FETCH))
            try:
                return merge_rows(row for part in result.partitions() for row in part)
            finally:
                result.close()

    def summary_windows(
        self,
        series: str,
        *,
        units: list[int],
        percentiles: tuple[float, ...] = (50.0, 95.0),
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """One series of the given units, window by window (windows of SUMMARY_WINDOW life cycles;
        several runs' pieces of one window merged): unit_id, window_no, count and the percentiles
        (n, len(percentiles)), sorted by unit and window. Percentiles as in numpy's default, read
        from the histogram (within RESOLUTION of the raw values' percentiles)."""
        t = s.Summary.__table__.c
        q = (
            select(t.unit_id, t.window_no, t.bins, t.counts, t.min, t.max)
            .where(t.series == series, t.unit_id.in_(_ints(units)))
            .order_by(t.unit_id, t.window_no)
        )
        integer = is_integer(series)
        parts: list[tuple[np.ndarray, ...]] = []
        with self._read("summaries") as c:  # type: ignore[attr-defined]
            result = c.execute(q.execution_options(yield_per=_FETCH))
            try:
                pending: list = []  # the rows of the last window read: its pieces may go on
                for part in result.partitions():
                    rows = pending + list(part)
                    if not rows:
                        continue
                    last = (rows[-1].unit_id, rows[-1].window_no)
                    cut = len(rows)
                    while cut and (rows[cut - 1].unit_id, rows[cut - 1].window_no) == last:
                        cut -= 1
                    if cut:
                        parts.append(_window_figures(rows[:cut], integer, percentiles))
                    pending = rows[cut:]
                if pending:
                    parts.append(_window_figures(pending, integer, percentiles))
            finally:
                result.close()
        if not parts:
            return (
                np.zeros(0, np.int64),
                np.zeros(0, np.int64),
                np.zeros(0, np.int64),
                np.zeros((0, len(percentiles)), np.float64),
            )
        return tuple(np.concatenate(x) for x in zip(*parts, strict=True))  # type: ignore[return-value]


def _window_figures(rows, integer: bool, percentiles) -> tuple[np.ndarray, ...]:
    """unit, window, count and percentiles of whole windows, `rows` sorted by (unit, window): each
    window's pieces merged bin by bin, then `weighted_percentile` for every window at once (the same
    arithmetic, so the same floats as one window at a time)."""
    n = len(rows)
    unit = np.fromiter((r.unit_id for r in rows), np.int64, n)
    window = np.fromiter((r.window_no for r in rows), np.int64, n)
    rmin = np.fromiter((r.min for r in rows), np.float64, n)
    rmax = np.fromiter((r.max for r in rows), np.float64, n)
    first = np.ones(n, bool)
    first[1:] = (unit[1:] != unit[:-1]) | (window[1:] != window[:-1])
    row_start = np.flatnonzero(first)
    n_groups = len(row_start)
    lo = np.minimum.reduceat(rmin, row_start)
    hi = np.maximum.reduceat(rmax, row_start)
    bins_l = [unpack(r.bins) for r in rows]
    counts_l = [unpack(r.counts) for r in rows]
    g = np.repeat(np.cumsum(first) - 1, [len(b) for b in bins_l])
    bins = np.concatenate(bins_l)
    counts = np.concatenate(counts_l)
    order = np.lexsort((bins, g))
    g, bins, counts = g[order], bins[order], counts[order]
    new = np.ones(len(g), bool)
    new[1:] = (g[1:] != g[:-1]) | (bins[1:] != bins[:-1])
    at = np.flatnonzero(new)
    ug, w = g[at], np.add.reduceat(counts, at)
    v = np.clip(bin_values(bins[at], integer), lo[ug], hi[ug])
    ids = np.arange(n_groups)
    g0 = np.searchsorted(ug, ids, "left")
    g1 = np.searchsorted(ug, ids, "right") - 1  # each window's last bin
    cum = np.cumsum(w)
    base = np.where(g0 > 0, cum[np.maximum(g0 - 1, 0)], 0)
    total = cum[g1] - base
    out = np.empty((n_groups, len(percentiles)), np.float64)
    for j, p in enumerate(percentiles):
        h = (total - 1.0) * p / 100.0
        fl, ce = np.floor(h), np.ceil(h)
        ia = np.clip(np.searchsorted(cum, base + fl, side="right"), g0, g1)
        ib = np.clip(np.searchsorted(cum, base + ce, side="right"), g0, g1)
        a, b = v[ia], v[ib]
        out[:, j] = a + (h - fl) * (b - a)
    return unit[row_start], window[row_start], total.astype(np.int64), out
