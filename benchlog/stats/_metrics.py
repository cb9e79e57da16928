"""From the actuation table (benchlog.analysis ACTUATION_DTYPE) to per-metric, unit-tagged samples."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from benchlog.analysis._types import BREAK, FREE_RUNNING, INCOMPLETE, MAKE, MISSED, STUCK
from benchlog.errors import DataError
from benchlog.stats._compare import UnitSample

__all__ = ["Metric", "METRICS", "metric_samples"]


@dataclass(frozen=True)
class Metric:
    key: str
    label: str
    unit: str  # of the stored values
    kind: str  # "percentile" (a time) or "rate" (events per cycle)
    display_scale: float  # stored value * scale = shown value
    display_unit: str


METRICS: dict[str, Metric] = {
    m.key: m
    for m in (
        Metric("make_bounce", "make bounce", "us", "percentile", 1e-3, "ms"),
        Metric("break_bounce", "break bounce", "us", "percentile", 1e-3, "ms"),
        Metric("operate", "operate time", "us", "percentile", 1e-3, "ms"),
        Metric("release", "release time", "us", "percentile", 1e-3, "ms"),
        Metric("chatter", "chatter rate", "events/cycle", "rate", 1000.0, "per 1,000 cycles"),
    )
}

_NOT_MEASURED = INCOMPLETE | MISSED | STUCK


def metric_samples(actuations: np.ndarray, unit: np.ndarray) -> dict[str, UnitSample]:
    """Split actuations into one unit-tagged sample per metric.

    Actuations flagged incomplete (a data gap), missed or stuck (a failure, counted in the life table)
    are left out; operate and release times need a drive record, so free-running actuations give only
    bounce. Chatter becomes events per cycle per unit: the chatter after the make and after the break
    of one cycle added together, one value per (unit, cycle).
    """
    unit = np.asarray(unit)
    if len(unit) != len(actuations):
        raise DataError("one unit id per actuation is needed")
    ok = (actuations["flags"] & _NOT_MEASURED) == 0
    make = ok & (actuations["kind"] == MAKE)
    brk = ok & (actuations["kind"] == BREAK)
    anchored = (actuations["flags"] & FREE_RUNNING) == 0
    out = {
        "make_bounce": UnitSample.of(actuations["bounce_us"][make], unit[make]),
        "break_bounce": UnitSample.of(actuations["bounce_us"][brk], unit[brk]),
        "operate": UnitSample.of(actuations["transit_us"][make & anchored], unit[make & anchored]),
        "release": UnitSample.of(actuations["transit_us"][brk & anchored], unit[brk & anchored]),
    }
    names, codes = np.unique(unit[ok].astype(str), return_inverse=True)
    cycles = actuations["cycle"][ok].astype(np.int64)
    lo = int(cycles.min(initial=0))
    span = int(cycles.max(initial=0)) - lo + 1
    keys, inverse = np.unique(codes.astype(np.int64) * span + (cycles - lo), return_inverse=True)
    per_cycle = np.bincount(inverse, actuations["chatter"][ok].astype(np.float64), len(keys))
    out["chatter"] = UnitSample.of(per_cycle, names[keys // span] if len(keys) else np.array([], str))
    return out
