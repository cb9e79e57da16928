"""From a capture's derived edges to the analysis stage: the same actuation rows as the digital path.

Run time starts at the capture's first sample (analysis times are >= 0 ns); `t0_s` maps them back to
the capture's own time axis (a scope's trigger at 0 s leaves pre-trigger samples negative).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from benchlog.analog._capture import Capture
from benchlog.analog._edges import Edges, Levels, check_rate, derive_edges, drive_edges
from benchlog.analysis import AnalysisSettings, Analyzer
from benchlog.errors import DataError
from benchlog.events import TimedDrives, TimedEdges


@dataclass(frozen=True, slots=True, eq=False)
class Measured:
    """One channel of a capture measured: its edges, the actuation rows, and what defined them."""

    channel: str
    levels: Levels
    edges: Edges
    actuations: np.ndarray  # ACTUATION_DTYPE, times in run time (ns from the first sample)
    t0_s: float  # capture time of run time 0
    end_ns: int


def run_ns(cap: Capture, t_s: np.ndarray) -> np.ndarray:
    return np.round((np.asarray(t_s) - cap.t0_s) * 1e9).astype(np.int64)


def analyse_edges(
    cap: Capture,
    edges: Edges,
    settings: AnalysisSettings,
    spec: object | None = None,
    drives: Edges | None = None,
    channel: int = 0,
) -> np.ndarray:
    """Edges of one channel through the analysis stage (free-running unless drive edges are given)."""
    end_ns = int(run_ns(cap, np.array([cap.end_s]))[0]) + 1
    te = TimedEdges(
        run_ns(cap, edges.t_s), np.full(len(edges), channel, np.uint8), edges.level.astype(np.uint8)
    )
    td = TimedDrives.empty()
    if drives is not None and len(drives):
        td = TimedDrives(
            run_ns(cap, drives.t_s), np.full(len(drives), channel, np.uint8), drives.level.astype(np.uint8)
        )
    an = Analyzer(settings, spec)
    rows = np.concatenate((an.push(te, td, until_ns=0), an.flush(until_ns=end_ns)))
    return rows[np.argsort(rows["t_start_ns"], kind="stable")]


def measure_capture(
    cap: Capture,
    channel: str | int,
    levels: Levels,
    settings: AnalysisSettings,
    spec: object | None = None,
    drive_channel: str | int | None = None,
    closed_high: bool = False,
) -> Measured:
    """Derive one channel's edges by `levels` and measure its actuations with the analysis stage."""
    ci = cap.channel(channel)
    check_rate(cap, levels)
    v = cap.volts[ci]
    if closed_high:  # measured across a load: high when closed; reflect it to a contact voltage
        if levels.v_open is None:
            raise DataError("a trace that is high when closed needs thresholds as fractions of its level")
        v = levels.v_open - v
    edges = derive_edges(cap, v, levels)
    drives = drive_edges(cap, cap.volts[cap.channel(drive_channel)]) if drive_channel is not None else None
    rows = analyse_edges(cap, edges, settings, spec, drives)
    end_ns = int(run_ns(cap, np.array([cap.end_s]))[0])
    return Measured(cap.names[ci], levels, edges, rows, cap.t0_s, end_ns)
