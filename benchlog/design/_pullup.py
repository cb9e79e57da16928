"""Estimating an unknown pull-up from two voltmeter readings (the divider method).

Read the pin open (it sits at the supply through the pull-up: `V_open`), then with a known resistor R from
the pin to ground (`V_load`). The pull-up and R form a divider: `V_load = V_open R / (Rp + R)`, so
`Rp = R (V_open - V_load) / V_load` (common practice, no source). The meter's own input resistance Zm
loads both readings; with it `Rp = R' (V_open - V_load) / (V_load - V_open R' / Zm)`, R' = R || Zm.

Uncertainty: a meter is specified as +-(% of reading + digits x resolution); the resistor by its
tolerance. Two figures are given: the worst case over every corner of those limits, and a standard
uncertainty combined by first-order propagation (GUM, JCGM 100:2008) treating each limit as a rectangular
distribution (u = a / sqrt 3), expanded with k = 2.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

from benchlog.errors import ConfigError


@dataclass(frozen=True, slots=True)
class Meter:
    pct_of_reading: float = 0.5  # % of reading
    digits: int = 2
    resolution_v: float = 0.001  # one digit, volts
    input_ohms: float = 10e6  # math.inf: ignore loading

    def limit(self, reading: float) -> float:
        """Half-width of the meter's accuracy limits at `reading` (volts)."""
        return abs(reading) * self.pct_of_reading / 100.0 + self.digits * self.resolution_v


@dataclass(frozen=True, slots=True)
class PullupEstimate:
    ohms: float
    low: float  # worst case over the accuracy corners
    high: float
    std_ohms: float  # combined standard uncertainty
    expanded_ohms: float  # k = 2
    supply_v: float  # the open-circuit (Thevenin) voltage, meter loading removed


def _rp(v_open: float, v_load: float, r: float, zm: float) -> float:
    rr = r if math.isinf(zm) else r * zm / (r + zm)
    denom = v_load - (0.0 if math.isinf(zm) else v_open * rr / zm)
    if denom <= 0:
        return math.inf
    return rr * (v_open - v_load) / denom


def estimate_pullup(
    v_open: float, v_load: float, resistor_ohms: float, resistor_tol: float = 0.01, meter: Meter | None = None
) -> PullupEstimate:
    """Pull-up estimate from `v_open` and `v_load` (see module doc). `resistor_tol` is a fraction."""
    meter = meter or Meter()
    if not (v_open > 0 and v_load > 0 and resistor_ohms > 0):
        raise ConfigError("the two readings and the resistor must be positive")
    if v_load >= v_open:
        raise ConfigError(f"the loaded reading ({v_load} V) must be below the open one ({v_open} V)")
    if not (0 <= resistor_tol < 1):
        raise ConfigError("resistor tolerance must be a fraction between 0 and 1")
    zm = meter.input_ohms
    rp = _rp(v_open, v_load, resistor_ohms, zm)
    a_open, a_load, a_r = meter.limit(v_open), meter.limit(v_load), resistor_ohms * resistor_tol
    corners = [
        _rp(v_open + so * a_open, v_load + sl * a_load, resistor_ohms + sr * a_r, zm)
        for so, sl, sr in itertools.product((-1, 1), repeat=3)
    ]
    if v_load + a_load >= v_open - a_open:
        raise ConfigError("the two readings overlap within the meter's accuracy: use a smaller resistor")
    # first-order propagation: partial derivatives by central differences
    var = 0.0
    for i, a in enumerate((a_open, a_load, a_r)):
        h = max(a * 1e-3, 1e-12)
        args_hi = [v_open, v_load, resistor_ohms]
        args_lo = list(args_hi)
        args_hi[i] += h
        args_lo[i] -= h
        d = (_rp(*args_hi, zm) - _rp(*args_lo, zm)) / (2 * h)
        var += (d * a / math.sqrt(3.0)) ** 2
    u = math.sqrt(var)
    supply = v_open if math.isinf(zm) else v_open * (rp + zm) / zm
    return PullupEstimate(rp, min(corners), max(corners), u, 2 * u, supply)
