"""Hand-built traces on an exact sample grid: piecewise-linear, so interpolated crossings are exact."""

from __future__ import annotations

import numpy as np

from benchlog.analog import Capture


def piecewise(points: list[tuple[float, float]], dt_ns: float, end_ns: float) -> Capture:
    """A trace through (t_ns, volts) breakpoints, linear between them, sampled every dt_ns from 0."""
    t = np.arange(0.0, end_ns + dt_ns / 2, dt_ns)
    tp, vp = zip(*points, strict=True)
    return Capture("hand-built", ("contact",), (np.interp(t, tp, vp),), 0.0, dt_ns * 1e-9)


def make_with_reopening(
    v_open: float, peak_fraction: float, above_ns: float, ramp_ns: float = 100.0
) -> list[tuple[float, float]]:
    """Open at v_open; a make at 1 ms; at 1.2 ms a trapezoid reopening to peak_fraction * v_open that
    stays at or above 90 % of v_open for `above_ns` (when its peak reaches that high); then closed."""
    peak = peak_fraction * v_open
    # with the peak at 100 %: each 90 % crossing sits 0.1 ramp before the top of its ramp
    flat = above_ns - 2 * 0.1 * ramp_ns if peak_fraction >= 1.0 else above_ns
    a = 1_200_000.0
    return [
        (0.0, v_open),
        (1_000_000.0, v_open),
        (1_000_000.0 + ramp_ns, 0.0),
        (a, 0.0),
        (a + ramp_ns, peak),
        (a + ramp_ns + flat, peak),
        (a + 2 * ramp_ns + flat, 0.0),
        (8_000_000.0, 0.0),
    ]
