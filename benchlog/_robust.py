"""The few statistics the recording path needs, in numpy and the standard library alone.

The recorder, the live feed and the dashboard judge clock error and drift on every few windows. Importing
scipy's stats and signal packages for three small functions costs a recorder process about 3 s of CPU
at start (measured on a 2-core machine), paid by every `record`, `demo` and `dash` a lab starts. These
functions compute what scipy's would on the same input; tests/analysis/test_robust.py holds them to
scipy itself.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np


def _normal():
    from statistics import NormalDist  # statistics is slow to import, and only this needs it

    return NormalDist()


class TheilSen(NamedTuple):
    slope: float
    intercept: float
    low_slope: float
    high_slope: float


def normal_cdf(x):
    """The standard normal distribution function (as scipy.special.ndtr), elementwise."""
    x = np.asarray(x, np.float64)
    out = np.vectorize(lambda v: 0.5 * math.erfc(-v / math.sqrt(2.0)), otypes=[np.float64])(x)
    return float(out) if out.ndim == 0 else out


def _tie_sum(values: np.ndarray) -> float:
    _, counts = np.unique(values, return_counts=True)
    k = counts[counts > 1].astype(np.float64)
    return float((k * (k - 1) * (2 * k + 5)).sum())


def theil_sen(y, x, alpha: float = 0.95) -> TheilSen:
    """Theil's slope (median of the pairwise slopes, Theil 1950) with Sen's confidence interval for it
    (Sen, *J. Amer. Statist. Assoc.* 63, 1968, eq. 2.6), the intercept as median(y) - slope median(x):
    the definition scipy.stats.theilslopes implements (method "separate")."""
    y = np.asarray(y, np.float64).ravel()
    x = np.asarray(x, np.float64).ravel()
    if len(x) != len(y) or len(x) < 2:
        raise ValueError("x and y must be of one length, at least 2")
    dx = x[:, None] - x
    dy = y[:, None] - y
    up = dx > 0
    slopes = np.sort(dy[up] / dx[up])
    if not slopes.size:
        return TheilSen(math.nan, math.nan, math.nan, math.nan)
    slope = float(np.median(slopes))
    intercept = float(np.median(y) - slope * np.median(x))
    if alpha > 0.5:
        alpha = 1.0 - alpha
    z = _normal().inv_cdf(alpha / 2.0)
    n = len(y)
    nt = len(slopes)
    sigsq = (n * (n - 1) * (2 * n + 5) - _tie_sum(x) - _tie_sum(y)) / 18.0
    if not sigsq >= 0:  # no interval (scipy gives nan there too)
        return TheilSen(slope, intercept, math.nan, math.nan)
    sigma = math.sqrt(sigsq)
    hi = min(int(np.round((nt - z * sigma) / 2.0)), nt - 1)
    lo = max(int(np.round((nt + z * sigma) / 2.0)) - 1, 0)
    return TheilSen(slope, intercept, float(slopes[lo]), float(slopes[hi]))


def first_order_filter(x, lam: float, z0: float) -> np.ndarray:
    """z_i = lam x_i + (1 - lam) z_(i-1), starting from z_0 (the EWMA recursion; what
    scipy.signal.lfilter([lam], [1, -(1 - lam)], x, zi=[(1 - lam) z0]) returns)."""
    x = np.asarray(x, np.float64)
    out = np.empty_like(x)
    keep = 1.0 - lam
    z = float(z0)
    for i, v in enumerate(x.tolist()):
        z = lam * v + keep * z
        out[i] = z
    return out
