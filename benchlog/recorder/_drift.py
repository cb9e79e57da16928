"""The recorder's drift flag: each living unit's trends judged as their rollup windows complete, the way
the dashboard judges them (`benchlog.analysis.judge_drift` over the windows' statistic against the
spec's limit), so the first flag is dated when it is first raised rather than found in the morning.

Each unit's series is held coarsened (`benchlog.analysis.CoarseSeries`: the points the dashboard
charts, at most DRIFT_POINTS of them and a few unfinished groups), so the watch's memory and each
judgement's cost stay flat over a run of any length.

Every window is judged as it completes, one at a time, so the flag's cycle does not depend on how the
host's clock cut the recording into flushes: the same recording dates the same flag. Once a unit is
flagged, it is judged no more (only the first flag is kept); a failed unit is not judged.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from benchlog.analysis import DRIFT_METRICS, CoarseSeries, drift_limit, judge_drift

_STAT_COLUMN = {"p50": 8, "p95": 9, "max": 10}  # in a rollup row (see RunWriter.take_rollups)


@dataclass(frozen=True, slots=True)
class DriftFlagged:
    channel: int
    unit_id: int
    metric: str
    kind: int
    cycle: int  # the last life cycle of the window that raised the flag


class DriftWatch:
    """Feed it the rollup rows the writer committed (`RunWriter.take_rollups`); `push` returns the units
    flagged for the first time."""

    def __init__(self, writer, specs: dict[int, object]) -> None:
        self.writer = writer
        self._by_key = {(col, kind): metric for metric, (col, kind) in DRIFT_METRICS.items()}
        # per unit: its channel, the limit and statistic of each metric, the spec's required life
        self._units: dict[int, tuple[int, dict[str, tuple[float | None, str]], float | None]] = {}
        self._series: dict[tuple[int, str], CoarseSeries] = {}
        for ch, unit in writer.units.items():
            if writer.status.get(unit) != "alive" or unit in writer.drift_flagged:
                continue
            spec = specs.get(ch)
            limits = {}
            for metric in DRIFT_METRICS:
                lim = drift_limit(spec, metric)
                limits[metric] = (lim[0], lim[1]) if lim else (None, "p95")
            life = spec.life.min_cycles if spec is not None and spec.life is not None else None
            self._units[unit] = (ch, limits, life)
            for metric, (col, kind) in DRIFT_METRICS.items():
                # the windows of the unit's life before this recording (earlier runs, earlier segments)
                t = writer.store.trend(unit, col, kind=kind)
                stat = getattr(t, limits[metric][1])
                self._series[(unit, metric)] = CoarseSeries.of(t.cycle_lo, t.cycle_hi, t.count, stat)
        writer.keep_rollups = bool(self._units)

    def push(self, rollups: list[tuple]) -> list[DriftFlagged]:
        """Judge every window just committed, in cycle order per unit; returns the first flags raised."""
        flagged: list[DriftFlagged] = []
        if not self._units or not rollups:
            return flagged
        rows = sorted(
            (r for r in rollups if r[0] in self._units and (r[1], r[2]) in self._by_key),
            key=lambda r: (r[0], r[6], r[2]),
        )
        for r in rows:
            unit = r[0]
            if unit not in self._units:
                continue  # flagged by an earlier row of this batch
            if self.writer.status.get(unit) != "alive":
                self._forget(unit)
                continue
            metric = self._by_key[(r[1], r[2])]
            ch, limits, life = self._units[unit]
            limit, stat = limits[metric]
            v = r[_STAT_COLUMN[stat]]
            if not r[7]:
                continue  # a window without data changes nothing the dashboard charts
            series = self._series[(unit, metric)]
            series.add(r[5], r[6], r[7], math.nan if v is None else v)
            report = judge_drift(series.windows(), limit, life, quick=True)
            if report is not None and report.confirmed:
                flagged.append(DriftFlagged(ch, unit, metric, int(r[2]), int(r[6])))
                self._forget(unit)
        return flagged

    def _forget(self, unit: int) -> None:
        self._units.pop(unit, None)
        for metric in DRIFT_METRICS:
            self._series.pop((unit, metric), None)
        if not self._units:
            self.writer.keep_rollups = False
