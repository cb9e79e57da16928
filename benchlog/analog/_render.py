"""Contact edges rendered to the voltage a scope would see across the contact (for tests and the demo).

The bench circuit: a supply `v_open` through a load resistor to the contact. Open, the contact shows the
supply; closed, the divider of its contact resistance and the load. Each change of state is a linear
ramp of `ramp_ns` centred on the edge time (a step filtered by a box of that width, so overlapping
ramps of a fast bounce add up the way the box filter says), then Gaussian noise and the quantisation of
an ADC of `bits` over `full_scale_v` are added. Everything is vectorised over the samples.
"""

from __future__ import annotations

import numpy as np


def _integral(
    t_ns: np.ndarray, closed_v: float, open_v: float, level: np.ndarray, initial: int, x: np.ndarray
):
    """Integral from the first edge of the ideal (stepwise) contact voltage, evaluated at `x` (ns)."""
    volts = np.where(level == 1, closed_v, open_v)
    v_before = closed_v if initial == 1 else open_v
    seg = np.diff(t_ns) * volts[:-1]
    acc = np.concatenate(([0.0], np.cumsum(seg)))
    j = np.searchsorted(t_ns, x, side="right") - 1
    inside = j >= 0
    jj = np.maximum(j, 0)
    return np.where(inside, acc[jj] + volts[jj] * (x - t_ns[jj]), v_before * (x - t_ns[0]))


def render_contact(
    t_ns: np.ndarray,
    level: np.ndarray,
    initial: int,
    *,
    start_ns: float,
    dt_ns: float,
    n: int,
    v_open: float = 12.0,
    r_contact: float = 0.05,
    r_load: float = 120.0,
    ramp_ns: float = 200.0,
    noise_v: float = 0.02,
    bits: int | None = None,
    full_scale_v: float | None = None,
    rng: np.random.Generator | None = None,
) -> np.ndarray:
    """Volts across the contact at `start_ns + k dt_ns`, k < n, for edges (`t_ns`, `level`, 1 = closed)."""
    t = np.asarray(t_ns, np.float64)
    lv = np.asarray(level, np.int8)
    closed_v = v_open * r_contact / (r_contact + r_load)
    at = start_ns + np.arange(n) * dt_ns
    if len(t) == 0:
        v = np.full(n, closed_v if initial == 1 else v_open)
    else:
        half = max(ramp_ns, 1e-9) / 2
        upper = _integral(t, closed_v, v_open, lv, initial, at + half)
        lower = _integral(t, closed_v, v_open, lv, initial, at - half)
        v = (upper - lower) / (2 * half)
    if noise_v > 0:
        rng = rng or np.random.default_rng(0)
        v = v + rng.normal(0.0, noise_v, n)
    if bits:
        fs = full_scale_v or 1.25 * v_open
        q = fs / (1 << bits)
        v = np.clip(np.round(v / q), -(1 << (bits - 1)), (1 << bits) - 1) * q
    return v
