"""Reading the distribution summaries (`Store.summaries`): merged per unit and series, streamed."""

from __future__ import annotations

from numbers import Integral

import numpy as np
from sqlalchemy import select

from . import _schema as s
from ._summary import SERIES, SeriesSummary, bin_values, is_integer, merge_rows, unpack, weighted_percentile

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
        out_u, out_w, out_n, out_p = [], [], [], []
        with self._read("summaries") as c:  # type: ignore[attr-defined]
            result = c.execute(q.execution_options(yield_per=_FETCH))
            try:
                pending: list = []
                key = None
                for part in result.partitions():
                    for r in part:
                        k = (int(r.unit_id), int(r.window_no))
                        if key is not None and k != key:
                            _window_figures(pending, key, integer, percentiles, out_u, out_w, out_n, out_p)
                            pending = []
                        key = k
                        pending.append(r)
                if pending:
                    _window_figures(pending, key, integer, percentiles, out_u, out_w, out_n, out_p)
            finally:
                result.close()
        return (
            np.array(out_u, np.int64),
            np.array(out_w, np.int64),
            np.array(out_n, np.int64),
            np.array(out_p, np.float64).reshape(len(out_u), len(percentiles)),
        )


def _window_figures(rows, key, integer, percentiles, out_u, out_w, out_n, out_p) -> None:
    bins = np.concatenate([unpack(r.bins) for r in rows])
    counts = np.concatenate([unpack(r.counts) for r in rows])
    ub, inv = np.unique(bins, return_inverse=True)
    w = np.bincount(inv, counts, len(ub))
    lo, hi = min(r.min for r in rows), max(r.max for r in rows)
    v = np.clip(bin_values(ub, integer), lo, hi)
    out_u.append(key[0])
    out_w.append(key[1])
    out_n.append(int(w.sum()))
    out_p.append([weighted_percentile(v, w, p) for p in percentiles])
