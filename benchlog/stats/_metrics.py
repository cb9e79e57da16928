"""From the actuation table (benchlog.analysis ACTUATION_DTYPE, or the store's rows with unit ids)
to per-metric, unit-tagged samples. Metric names are the part spec's (docs/spec.md)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from benchlog.analysis import BREAK, INCOMPLETE, MAKE, MISSED, NO_CHANGE, STUCK
from benchlog.errors import DataError
from benchlog.stats._compare import UnitSample

__all__ = ["Metric", "METRICS", "metric_samples"]


@dataclass(frozen=True)
class Metric:
    key: str
    label: str
    column: str  # ACTUATION_DTYPE column ("" for chatter, which is per cycle)
    rows: str  # which actuations: make, break, operate (drive on), release (drive off)
    kind: str  # "percentile" (a time or count) or "rate" (events per cycle)
    display_scale: float  # stored value * scale = shown value
    display_unit: str


METRICS: dict[str, Metric] = {
    m.key: m
    for m in (
        Metric("make_bounce", "make bounce", "bounce_us", "make", "percentile", 1e-3, "ms"),
        Metric("break_bounce", "break bounce", "bounce_us", "break", "percentile", 1e-3, "ms"),
        Metric("operate_time", "operate time", "transit_us", "operate", "percentile", 1e-3, "ms"),
        Metric("release_time", "release time", "transit_us", "release", "percentile", 1e-3, "ms"),
        Metric(
            "make_longest_gap", "make longest bounce gap", "longest_gap_us", "make", "percentile", 1.0, "us"
        ),
        Metric(
            "break_longest_gap",
            "break longest bounce gap",
            "longest_gap_us",
            "break",
            "percentile",
            1.0,
            "us",
        ),
        Metric("make_bounce_count", "make bounce count", "bounce_count", "make", "percentile", 1.0, ""),
        Metric("break_bounce_count", "break bounce count", "bounce_count", "break", "percentile", 1.0, ""),
        Metric("chatter", "chatter rate", "", "cycle", "rate", 1000.0, "per 1,000 cycles"),
    )
}

_NOT_MEASURED = INCOMPLETE | MISSED | STUCK | NO_CHANGE


def _rows(actuations: np.ndarray, which: str) -> np.ndarray:
    if which == "make":
        return actuations["kind"] == MAKE
    if which == "break":
        return actuations["kind"] == BREAK
    level = 1 if which == "operate" else 0
    return actuations["drive_level"] == level


def metric_samples(actuations: np.ndarray, unit: np.ndarray | None = None) -> dict[str, UnitSample]:
    """Split actuations into one unit-tagged sample per metric.

    `unit` defaults to the rows' own `unit_id` column (the store's rows carry it). Actuations flagged
    incomplete (a data gap), missed or stuck (a failure, counted in the life table) or no-change are
    left out, and NaN values (a metric that does not apply) are dropped. Operate time is the transit of
    the actuation a drive-on started, release time of the one a drive-off started, as the spec judges
    them. Chatter becomes events per cycle: the chatter after both actuations of one cycle added
    together, one value per (unit, cycle).
    """
    if unit is None:
        if "unit_id" not in (actuations.dtype.names or ()):
            raise DataError("actuations without unit ids: pass one unit id per actuation")
        unit = actuations["unit_id"]
    unit = np.asarray(unit)
    if len(unit) != len(actuations):
        raise DataError("one unit id per actuation is needed")
    ok = (actuations["flags"] & _NOT_MEASURED) == 0
    out: dict[str, UnitSample] = {}
    for key, m in METRICS.items():
        if m.kind == "percentile":
            sel = ok & _rows(actuations, m.rows)
            out[key] = UnitSample.of(actuations[m.column][sel].astype(np.float64), unit[sel])
    names, codes = np.unique(unit[ok].astype(str), return_inverse=True)
    cycles = actuations["cycle"][ok].astype(np.int64)
    lo = int(cycles.min(initial=0))
    span = int(cycles.max(initial=0)) - lo + 1
    keys, inverse = np.unique(codes.astype(np.int64) * span + (cycles - lo), return_inverse=True)
    per_cycle = np.bincount(inverse, actuations["chatter"][ok].astype(np.float64), len(keys))
    out["chatter"] = UnitSample.of(per_cycle, names[keys // span] if len(keys) else np.array([], str))
    return out
