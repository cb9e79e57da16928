"""Drift over a unit's life: per-window statistics, EWMA and CUSUM charts, and a crossing projection.

The charts follow D. C. Montgomery, *Introduction to Statistical Quality Control* (chapter on cumulative
sum and exponentially weighted moving average charts) and the NIST/SEMATECH e-Handbook of Statistical
Methods, section 6.3.2.4 (EWMA control charts):

- EWMA: z_i = lambda * x_i + (1 - lambda) * z_{i-1}, z_0 = mu_0; limits
  mu_0 +/- L * sigma * sqrt(lambda / (2 - lambda) * (1 - (1 - lambda)**(2 i))).
- Tabular CUSUM: C+_i = max(0, x_i - (mu_0 + K) + C+_{i-1}), C-_i = max(0, (mu_0 - K) - x_i + C-_{i-1}),
  K = k * sigma, signal when C+ or C- exceeds H = h * sigma.
- For individual values the baseline sigma is the average moving range over d2 = 1.128 (Montgomery's
  individuals chart).

The statistic charted is a robust one per window of cycles (by default the p95 of make bounce per
1,000 cycles), so one wild actuation moves nothing. The projection fits Theil-Sen (scipy.stats.theilslopes)
to the windows after the baseline and reports the cycle at which the line reaches the spec limit, with the
range given by the slope's confidence interval.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from benchlog.analysis._types import INCOMPLETE, MAKE, NO_CHANGE
from benchlog.errors import DataError

WINDOW_DTYPE = np.dtype(
    [
        ("cycle_start", np.int64),
        ("cycle_end", np.int64),  # exclusive
        ("count", np.int64),  # actuations with a value in the window
        ("value", np.float64),  # the window statistic (NaN when count is 0)
    ]
)

D2_N2 = 1.128  # d2 for moving ranges of two (Montgomery, table of control chart constants)


def window_stats(
    actuations: np.ndarray,
    window_cycles: int = 1000,
    column: str = "bounce_us",
    kind: int | None = MAKE,
    percentile: float = 95.0,
) -> np.ndarray:
    """Per window of `window_cycles` cycles: the `percentile` of `column` over complete actuations.

    Vectorised: one sort, then the linear-interpolation percentile (numpy's default) per group.
    """
    if window_cycles <= 0:
        raise DataError(f"window_cycles must be > 0, got {window_cycles}")
    rows = actuations
    sel = (rows["flags"] & (INCOMPLETE | NO_CHANGE)) == 0
    if kind is not None:
        sel &= rows["kind"] == kind
    values = rows[column][sel].astype(np.float64)
    cycles = rows["cycle"][sel]
    keep = ~np.isnan(values)
    values, cycles = values[keep], cycles[keep]
    if not len(values):
        return np.zeros(0, WINDOW_DTYPE)
    win = cycles // window_cycles
    first, last = int(win.min()), int(win.max())
    n_win = last - first + 1
    gid = win - first
    order = np.lexsort((values, gid))
    v = values[order]
    g = gid[order]
    counts = np.bincount(g, minlength=n_win)
    offsets = np.concatenate(([0], np.cumsum(counts)[:-1]))
    out = np.zeros(n_win, WINDOW_DTYPE)
    out["cycle_start"] = (np.arange(n_win) + first) * window_cycles
    out["cycle_end"] = out["cycle_start"] + window_cycles
    out["count"] = counts
    has = counts > 0
    pos = (percentile / 100.0) * np.maximum(counts - 1, 0)
    lo = np.floor(pos).astype(np.int64)
    hi = np.minimum(lo + 1, np.maximum(counts - 1, 0))
    frac = pos - lo
    base = offsets
    lo_v = v[np.minimum(base + lo, len(v) - 1)]
    hi_v = v[np.minimum(base + hi, len(v) - 1)]
    out["value"] = np.where(has, lo_v + frac * (hi_v - lo_v), np.nan)
    return out


@dataclass(frozen=True, slots=True)
class Baseline:
    mean: float
    sigma: float
    windows: int


def baseline(values: np.ndarray, n: int) -> Baseline:
    """Mean and sigma (average moving range / d2) of the first `n` values."""
    x = np.asarray(values, np.float64)[:n]
    x = x[~np.isnan(x)]
    if len(x) < 2:
        raise DataError(f"a baseline needs at least 2 windows with data, got {len(x)}")
    mr = np.abs(np.diff(x))
    sigma = float(mr.mean() / D2_N2)
    if sigma <= 0:
        sigma = float(np.std(x, ddof=1)) or 1e-12
    return Baseline(float(x.mean()), sigma, len(x))


def ewma(x: np.ndarray, mean: float, sigma: float, lam: float = 0.2, width: float = 3.0):
    """EWMA statistic and its (time-varying) lower and upper control limits."""
    x = np.asarray(x, np.float64)
    if not 0 < lam <= 1:
        raise DataError(f"EWMA lambda must be in (0, 1], got {lam}")
    n = len(x)
    # z_i = (1 - lam)^i z_0 + sum_j lam (1 - lam)^(i - j) x_j, computed as a linear filter.
    from scipy.signal import lfilter

    z = lfilter([lam], [1.0, -(1.0 - lam)], x, zi=[(1.0 - lam) * mean])[0]
    i = np.arange(1, n + 1)
    half = width * sigma * np.sqrt(lam / (2.0 - lam) * (1.0 - (1.0 - lam) ** (2 * i)))
    return z, mean - half, mean + half


def cusum(x: np.ndarray, mean: float, sigma: float, k: float = 0.5, h: float = 5.0):
    """Tabular CUSUM: (C+, C-, H). The recursion max(0, s + step) has a closed form per running minimum.

    With S the cumulative sum of steps, C_i = S_i - min(0, min_{j<=i} S_j): no loop per value.
    """
    x = np.asarray(x, np.float64)
    kk = k * sigma
    up = np.cumsum(x - (mean + kk))
    dn = np.cumsum((mean - kk) - x)
    c_plus = up - np.minimum(np.minimum.accumulate(up), 0.0)
    c_minus = dn - np.minimum(np.minimum.accumulate(dn), 0.0)
    return c_plus, c_minus, h * sigma


@dataclass(frozen=True, slots=True)
class Projection:
    """Where the Theil-Sen line of the window statistic meets the limit (cycles; None: never)."""

    slope_per_cycle: float
    slope_low: float
    slope_high: float
    intercept: float
    limit: float
    crossing_cycle: float | None
    crossing_low: float | None  # earliest (from the steepest slope in the interval)
    crossing_high: float | None  # latest (None: the shallowest slope never reaches it)
    confidence: float


def project(
    cycles: np.ndarray, values: np.ndarray, limit: float, confidence: float = 0.9
) -> Projection | None:
    """Theil-Sen fit of `values` against `cycles`; the cycle where it reaches `limit`."""
    from scipy.stats import theilslopes

    c = np.asarray(cycles, np.float64)
    v = np.asarray(values, np.float64)
    ok = ~np.isnan(v)
    c, v = c[ok], v[ok]
    if len(c) < 3:
        return None
    res = theilslopes(v, c, alpha=confidence)
    slope, intercept, lo, hi = float(res[0]), float(res[1]), float(res[2]), float(res[3])

    def cross(s: float) -> float | None:
        if s <= 0:
            return None
        b = float(np.median(v - s * c))  # the Theil-Sen intercept for this slope
        return (limit - b) / s

    return Projection(slope, lo, hi, intercept, float(limit), cross(slope), cross(hi), cross(lo), confidence)


@dataclass(frozen=True, slots=True)
class DriftReport:
    windows: np.ndarray  # WINDOW_DTYPE
    baseline: Baseline
    ewma: np.ndarray
    ewma_lower: np.ndarray
    ewma_upper: np.ndarray
    cusum_plus: np.ndarray
    cusum_minus: np.ndarray
    cusum_limit: float
    ewma_signal: np.ndarray  # bool per window
    cusum_signal: np.ndarray  # bool per window
    projection: Projection | None
    trend: Projection | None = None  # the Theil-Sen fit after the baseline, with or without a limit

    @property
    def signalled(self) -> bool:
        return bool(self.ewma_signal.any() or self.cusum_signal.any())

    @property
    def rising(self) -> bool:
        """The whole slope interval of the post-baseline trend lies above zero."""
        return self.trend is not None and self.trend.slope_low > 0

    @property
    def confirmed(self) -> bool:
        """A chart signalled and the trend is rising: what a flag for a person should require.

        The charts alone, on a baseline of a few windows, also signal on steady units now and then (a
        short baseline underestimates sigma); a signal backed by a rising trend is the wear that drift
        monitoring is for.
        """
        return self.signalled and self.rising

    @property
    def first_signal_cycle(self) -> int | None:
        hit = np.flatnonzero(self.ewma_signal | self.cusum_signal)
        return None if not len(hit) else int(self.windows["cycle_end"][hit[0]])

    @property
    def flags(self) -> list[str]:
        out = []
        ends = self.windows["cycle_end"]
        if self.ewma_signal.any():
            out.append(f"EWMA above its limit from cycle {int(ends[np.argmax(self.ewma_signal)])}")
        if self.cusum_signal.any():
            out.append(f"CUSUM above its limit from cycle {int(ends[np.argmax(self.cusum_signal)])}")
        if self.projection and self.projection.crossing_cycle is not None:
            p = self.projection
            out.append(f"trend reaches the limit near cycle {p.crossing_cycle:,.0f}")
        return out


def drift(
    windows: np.ndarray,
    limit: float | None = None,
    baseline_windows: int = 5,
    lam: float = 0.2,
    width: float = 3.0,
    k: float = 0.5,
    h: float = 5.0,
    upward_only: bool = True,
    confidence: float = 0.9,
) -> DriftReport:
    """Charts and projection over window statistics (WINDOW_DTYPE from `window_stats`).

    Upward drift is what wear does to bounce, so by default only the upper side signals.
    """
    values = windows["value"].astype(np.float64)
    base = baseline(values, baseline_windows)
    filled = np.where(np.isnan(values), base.mean, values)
    z, lo, hi = ewma(filled, base.mean, base.sigma, lam, width)
    cp, cm, hh = cusum(filled, base.mean, base.sigma, k, h)
    e_sig = z > hi if upward_only else (z > hi) | (z < lo)
    c_sig = cp > hh if upward_only else (cp > hh) | (cm > hh)
    has = ~np.isnan(values)
    e_sig &= has
    c_sig &= has
    trend = None
    mid = (windows["cycle_start"] + windows["cycle_end"]) / 2.0
    after = np.arange(len(values)) >= base.windows
    if after.sum() >= 3:
        trend = project(mid[after], values[after], math.inf if limit is None else limit, confidence)
    proj = trend if limit is not None else None
    return DriftReport(windows, base, z, lo, hi, cp, cm, hh, e_sig, c_sig, proj, trend)


class DriftMonitor:
    """Feeds window statistics as they complete (the store's rollups) and keeps the charts current.

    The baseline is frozen once `baseline_windows` windows have data; after that each `update` is
    O(new windows) for the charts. `report()` gives the full DriftReport (projection included).
    """

    def __init__(self, limit: float | None = None, baseline_windows: int = 5, **chart: float) -> None:
        self.limit = limit
        self.baseline_windows = baseline_windows
        self.chart = chart
        self._windows: list[np.ndarray] = []
        self._base: Baseline | None = None
        self._z: float | None = None
        self._cp = 0.0
        self._n = 0
        self.signals: list[tuple[int, str]] = []

    def update(self, windows: np.ndarray) -> list[tuple[int, str]]:
        """Add completed windows; return the new (cycle, chart) signals."""
        self._windows.append(np.asarray(windows, WINDOW_DTYPE))
        allw = np.concatenate(self._windows)
        new: list[tuple[int, str]] = []
        if self._base is None:
            if np.count_nonzero(~np.isnan(allw["value"])) < self.baseline_windows:
                return new
            self._base = baseline(allw["value"], self.baseline_windows)
            todo = allw
        else:
            todo = windows
        lam = float(self.chart.get("lam", 0.2))
        width = float(self.chart.get("width", 3.0))
        kk = float(self.chart.get("k", 0.5)) * self._base.sigma
        hh = float(self.chart.get("h", 5.0)) * self._base.sigma
        for w in todo:  # per window, not per edge: a handful per thousand cycles
            x = self._base.mean if np.isnan(w["value"]) else float(w["value"])
            self._n += 1
            self._z = lam * x + (1 - lam) * (self._base.mean if self._z is None else self._z)
            half = width * self._base.sigma * np.sqrt(lam / (2 - lam) * (1 - (1 - lam) ** (2 * self._n)))
            self._cp = max(0.0, x - (self._base.mean + kk) + self._cp)
            if not np.isnan(w["value"]):
                if self._z > self._base.mean + half:
                    new.append((int(w["cycle_end"]), "ewma"))
                if self._cp > hh:
                    new.append((int(w["cycle_end"]), "cusum"))
        self.signals.extend(new)
        return new

    def report(self) -> DriftReport:
        if not self._windows:
            raise DataError("no windows yet")
        return drift(
            np.concatenate(self._windows),
            self.limit,
            self.baseline_windows,
            **{k: float(v) for k, v in self.chart.items()},
        )
