"""Preferred number series for resistors and capacitors (IEC 60063: E12 and E24, two significant digits)."""

from __future__ import annotations

import numpy as np

from benchlog.errors import ConfigError

# IEC 60063, one decade of each series
E12 = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)
E24 = (
    1.0,
    1.1,
    1.2,
    1.3,
    1.5,
    1.6,
    1.8,
    2.0,
    2.2,
    2.4,
    2.7,
    3.0,
    3.3,
    3.6,
    3.9,
    4.3,
    4.7,
    5.1,
    5.6,
    6.2,
    6.8,
    7.5,
    8.2,
    9.1,
)
SERIES = {"E12": E12, "E24": E24}


def preferred_values(series: str, lo: float, hi: float) -> np.ndarray:
    """Every value of `series` ("E12" or "E24") in [lo, hi], ascending."""
    try:
        decade = SERIES[series.upper()]
    except KeyError:
        raise ConfigError(f"unknown preferred-value series {series!r}: use E12 or E24") from None
    if not (0 < lo <= hi):
        raise ConfigError(f"impossible value range {lo:g} .. {hi:g}")
    exps = range(int(np.floor(np.log10(lo))) - 1, int(np.ceil(np.log10(hi))) + 1)
    vals = np.array([float(f"{m * 10.0**e:.3g}") for e in exps for m in decade])
    return vals[(vals >= lo * (1 - 1e-9)) & (vals <= hi * (1 + 1e-9))]


def format_si(value: float, unit: str) -> str:
    """`4700, "ohm"` -> "4.7 kohm"; `1e-7, "F"` -> "100 nF"."""
    if value == 0:
        return f"0 {unit}"
    prefixes = [(1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "u"), (1e-9, "n"), (1e-12, "p")]
    for scale, p in prefixes:
        if abs(value) >= scale * 0.9995:
            return f"{value / scale:.3g} {p}{unit}"
    return f"{value:.3g} {unit}"
