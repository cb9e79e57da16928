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
1,000 cycles), so one wild actuation moves nothing. The projection fits Theil-Sen (as
scipy.stats.theilslopes computes it, in benchlog._robust) to the windows after the baseline and reports
the cycle at which the line reaches the spec limit, with the
range given by the slope's confidence interval.

A chart signal alone is not a flag for a person: a baseline of a few windows misjudges sigma, and over a
long life the charts signal on steady units now and then. The drift *flag* (`DriftReport.confirmed`)
needs three pieces of evidence, each named in its words:

- a chart signal (EWMA or CUSUM above its limit);
- a rising trend: Kendall's tau of the windows after the baseline against their cycles, one-sided, at
  `alpha` (default 0.001; Kendall, *Biometrika* 30, 1938; the test behind Sen's slope interval), so that
  a unit watched over its whole life, re-judged window after window, is seldom flagged by chance;
- with a limit: the Theil-Sen line reaches it within the horizon (the cycles the unit is meant to last).

A unit whose statistic has already stayed above its limit is *past the limit* since a stated cycle, and a
failed unit gets no projection. The calibration harness (tests/benchmarks/bench_calibration.py) measures
the flag's detection, lead and false alarms against the simulator's true statistic; docs/metrics.md
quotes the figures.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from benchlog._robust import first_order_filter, normal_cdf, theil_sen
from benchlog.analysis._types import BREAK, INCOMPLETE, MAKE, NO_CHANGE
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
DEFAULT_ALPHA = 0.001  # one-sided level of the trend test behind a drift flag
OVER_WINDOWS = 3  # the running median of this many windows above the limit: past the limit
BASELINE_MIN, BASELINE_MAX = 5, 20  # automatic baseline: the first quarter of the windows, 5 to 20


def auto_baseline(n_windows: int) -> int:
    """The baseline for a series of `n_windows`: its first quarter, at least 5 and at most 20 windows."""
    return max(BASELINE_MIN, min(BASELINE_MAX, n_windows // 4))


HORIZON_AHEAD = 1.4  # a projected crossing within this many times the cycles done raises the flag


def drift_horizon(last_cycle: float, life_cycles: float | None = None) -> float:
    """How far ahead a projected crossing makes a flag: the unit's required life (the spec's), and at
    least 1.4 times the cycles already done. A crossing projected further out is no concern yet (and a
    steady unit's slow creep must not raise a flag). A unit that crosses after the life is flagged
    with about 2/7 of its cycles to the crossing as warning (1 - 1/1.4; the harness measured a median
    lead of 0.28 against its target of 0.20). A quarter beyond gave 0.20, on the target by
    construction; half again flagged steady units that cross by 300,000 cycles; docs/metrics.md."""
    return max(float(life_cycles or 0.0), HORIZON_AHEAD * float(last_cycle))


def _p_text(p: float) -> str:
    return "< 0.0001" if p < 1e-4 else f"{p:.4f}"


def rising_trend_p(values: np.ndarray) -> float:
    """One-sided p-value of Kendall's tau for a rising trend of `values` in their order: the normal
    approximation with the variance corrected for ties (Kendall, *Rank Correlation Methods*, 1948),
    as scipy.stats.kendalltau(method="asymptotic") computes it, without its per-call overhead."""
    y = np.asarray(values, np.float64)
    n = len(y)
    s = float(np.triu(np.sign(y[None, :] - y[:, None]), 1).sum())
    _, t = np.unique(y, return_counts=True)
    var = (n * (n - 1) * (2 * n + 5) - float((t * (t - 1) * (2 * t + 5)).sum())) / 18.0
    return normal_cdf(-s / math.sqrt(var)) if var > 0 else math.nan


def over_since(windows: np.ndarray, limit: float, last: int = OVER_WINDOWS) -> int | None:
    """The cycle since which the window statistic has stayed above `limit`, judged on the running
    median of `last` windows (a percentile of one window of a hundred cycles scatters by several per
    cent, so one window dipping below the limit does not bring a unit well past it back); None when
    that median is not above the limit now."""
    v = windows["value"]
    has = np.flatnonzero(~np.isnan(v))
    if len(has) < last:
        return None
    vals = v[has]
    run = np.median(np.lib.stride_tricks.sliding_window_view(vals, last), axis=1)  # ends at i+last-1
    if not run[-1] > limit:
        return None
    below = np.flatnonzero(run <= limit)
    # the first window of the last stretch whose running median stays above the limit
    first = 0 if not len(below) else int(below[-1]) + 1
    first = min(first, len(has) - 1)
    # from there, the first window itself above the limit
    above = np.flatnonzero(vals[first:] > limit)
    first += int(above[0]) if len(above) else 0
    return int(windows["cycle_start"][has[first]])


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
    z = first_order_filter(x, lam, mean)
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
    # earliest and latest: from the steepest and shallowest slopes in the interval (in a drift report's
    # trend, widened to take in the latest half of the windows' own range; _with_recent_range)
    crossing_low: float | None
    crossing_high: float | None  # None: the shallowest slope never reaches it
    confidence: float


def project(
    cycles: np.ndarray, values: np.ndarray, limit: float, confidence: float = 0.9
) -> Projection | None:
    """Theil-Sen fit of `values` against `cycles`; the cycle where it reaches `limit`."""
    c = np.asarray(cycles, np.float64)
    v = np.asarray(values, np.float64)
    ok = ~np.isnan(v)
    c, v = c[ok], v[ok]
    if len(c) < 3:
        return None
    res = theil_sen(v, c, alpha=confidence)
    slope, intercept, lo, hi = float(res[0]), float(res[1]), float(res[2]), float(res[3])

    def cross(s: float) -> float | None:
        if s <= 0:
            return None
        b = float(np.median(v - s * c))  # the Theil-Sen intercept for this slope
        return (limit - b) / s

    return Projection(slope, lo, hi, intercept, float(limit), cross(slope), cross(hi), cross(lo), confidence)


def _with_recent_range(p: Projection | None, cycles: np.ndarray, values: np.ndarray, confidence: float):
    """`p` with its crossing range widened to take in the range the latest half of the windows gives.

    The whole trend's range is the slope's interval alone, on a straight line; wear bends the
    statistic a little (the simulator's make bounce p95 rises a few per cent slower late in life than
    early), so a straight line through the whole life reaches the limit early, and its range alone held
    the simulator's true crossing at 0.78 of first flags (nominal 0.90). The latest half's own line,
    with its wider interval, holds what the bend moves; the range stated is the union of the two where
    the latest half bounds a crossing of its own (its whole slope interval above zero), and the whole
    trend's otherwise (measured by tests/benchmarks/bench_calibration.py, docs/metrics.md)."""
    if p is None or math.isinf(p.limit) or len(cycles) < 8:
        return p
    half = len(cycles) // 2
    r = project(cycles[half:], values[half:], p.limit, confidence)
    if r is None or r.crossing_high is None or r.crossing_low is None:
        return p  # too few or too flat windows to bound a crossing of their own: the whole trend's stands
    low = r.crossing_low if p.crossing_low is None else min(p.crossing_low, r.crossing_low)
    high = None if p.crossing_high is None else max(p.crossing_high, r.crossing_high)
    return replace(p, crossing_low=low, crossing_high=high)


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
    trend_p: float = math.nan  # one-sided Kendall's tau p-value of a rising trend after the baseline
    alpha: float = DEFAULT_ALPHA
    horizon: float | None = None  # a crossing beyond this cycle is no concern (None: any crossing)
    over_since: int | None = None  # the statistic has stayed above the limit since this cycle
    failed_at: int | None = None  # the unit failed here: no projection

    @property
    def signalled(self) -> bool:
        return bool(self.ewma_signal.any() or self.cusum_signal.any())

    @property
    def rising(self) -> bool:
        """The post-baseline trend rises: Kendall's tau significant at `alpha`, one-sided."""
        return self.trend is not None and self.trend_p < self.alpha and self.trend.slope_per_cycle > 0

    @property
    def past_limit(self) -> bool:
        return self.over_since is not None

    @property
    def reaches_limit(self) -> bool:
        """The trend reaches the limit within the horizon (always, without a limit or a horizon)."""
        if self.projection is None:
            return self.limit is None
        c = self.projection.crossing_cycle
        return c is not None and (self.horizon is None or c <= self.horizon)

    @property
    def limit(self) -> float | None:
        return None if self.trend is None or math.isinf(self.trend.limit) else self.trend.limit

    @property
    def confirmed(self) -> bool:
        """The drift flag: a chart signal, a rising trend and (with a limit) a crossing within the
        horizon, or a chart signal with the statistic held past its limit. Measured against the simulator's
        truth by tests/benchmarks/bench_calibration.py."""
        if self.signalled and self.past_limit:
            # charted away from its baseline and held above its limit: a step or a rise too noisy
            # for the trend test is still drift past the limit (common practice, no source)
            return True
        if not (self.signalled and self.rising):
            return False
        if self.failed_at is not None and self.limit is not None:
            # failed (by a weld, a missed make, chatter): no projection is stated, but the flag still
            # needs the trend to have been heading for the limit within the horizon; a unit that
            # failed for another reason while far below its limit is not drifting toward it
            c = self.trend.crossing_cycle if self.trend is not None else None
            return c is not None and (self.horizon is None or c <= self.horizon)
        return self.reaches_limit

    @property
    def evidence(self) -> list[str]:
        """The flag's evidence, in words."""
        out = []
        ends = self.windows["cycle_end"]
        if self.ewma_signal.any():
            out.append(f"EWMA chart signal from cycle {int(ends[np.argmax(self.ewma_signal)]):,}")
        if self.cusum_signal.any():
            out.append(f"CUSUM chart signal from cycle {int(ends[np.argmax(self.cusum_signal)]):,}")
        if self.rising:
            out.append(f"rising trend (Kendall's tau, one-sided p {_p_text(self.trend_p)})")
        return out

    @property
    def outlook(self) -> str:
        """Where the unit stands against its limit, in words that cannot contradict each other."""
        if self.failed_at is not None:
            return f"failed at cycle {self.failed_at:,}: no projection"
        lim = self.limit
        if self.past_limit:
            return f"past its limit since cycle {self.over_since:,}"
        p = self.projection
        if lim is None or p is None:
            return ""
        if p.crossing_cycle is None:
            return "the trend does not reach the limit"
        hi = "never" if p.crossing_high is None else f"{p.crossing_high:,.0f}"
        lo = "-" if p.crossing_low is None else f"{p.crossing_low:,.0f}"
        return f"trend reaches the limit near cycle {p.crossing_cycle:,.0f} ({lo} to {hi})"

    @property
    def words(self) -> str:
        """The flag in one line: its evidence, then the outlook."""
        parts = self.evidence
        if self.outlook:
            parts = [*parts, self.outlook]
        return "; ".join(parts)

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
        if self.past_limit:
            out.append(f"past the limit since cycle {self.over_since}")
        elif self.projection and self.projection.crossing_cycle is not None:
            p = self.projection
            out.append(f"trend reaches the limit near cycle {p.crossing_cycle:,.0f}")
        return out


def drift(
    windows: np.ndarray,
    limit: float | None = None,
    baseline_windows: int | None = 5,
    lam: float = 0.2,
    width: float = 3.0,
    k: float = 0.5,
    h: float = 5.0,
    upward_only: bool = True,
    confidence: float = 0.9,
    *,
    alpha: float = DEFAULT_ALPHA,
    horizon: float | None = None,
    failed_at: int | None = None,
    quick: bool = False,
) -> DriftReport:
    """Charts and projection over window statistics (WINDOW_DTYPE from `window_stats`).

    Upward drift is what wear does to bounce, so by default only the upper side signals.
    `baseline_windows=None` takes the first quarter of the windows (5 to 20). `horizon`: a projected
    crossing beyond this cycle does not make a flag; `failed_at`: the unit failed there (no projection).
    `quick`: without a chart signal, no trend is fitted (no flag can stand without a signal): the flag
    (`confirmed`) is the same, the projection is left out.
    """
    values = windows["value"].astype(np.float64)
    if baseline_windows is None:
        baseline_windows = auto_baseline(int(np.count_nonzero(~np.isnan(values))))
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
    trend_p = math.nan
    mid = (windows["cycle_start"] + windows["cycle_end"]) / 2.0
    after = (np.arange(len(values)) >= base.windows) & has
    if after.sum() >= 3 and (not quick or e_sig.any() or c_sig.any()):
        trend = project(mid[after], values[after], math.inf if limit is None else limit, confidence)
        trend = _with_recent_range(trend, mid[after], values[after], confidence)
        if np.ptp(values[after]) > 0 and (e_sig.any() or c_sig.any()):  # a flag needs a signal anyway
            trend_p = rising_trend_p(values[after])
    over = None if limit is None else over_since(windows, limit)
    proj = trend if limit is not None and failed_at is None and over is None else None
    return DriftReport(
        windows,
        base,
        z,
        lo,
        hi,
        cp,
        cm,
        hh,
        e_sig,
        c_sig,
        proj,
        trend,
        trend_p,
        alpha,
        horizon,
        over,
        failed_at,
    )


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


# -- a unit's drift flag from its window series: what the dashboard shows and the recorder dates ---------
# the metrics judged for drift: key -> (actuation column, kind)
DRIFT_METRICS: dict[str, tuple[str, int]] = {
    "make_bounce": ("bounce_us", MAKE),
    "break_bounce": ("bounce_us", BREAK),
    "operate_time": ("transit_us", MAKE),
    "release_time": ("transit_us", BREAK),
}
DRIFT_POINTS = 240  # a longer series is coarsened to at most this many points (see coarse_windows)
DRIFT_MIN_WINDOWS = BASELINE_MIN + 2  # windows with data before a series is judged at all


def drift_limit(spec, metric: str) -> tuple[float, str, float] | None:
    """(max value, window statistic "p50" / "p95" / "max", percentile) of `spec`'s limit on `metric`, or
    None without a spec or a limit. A limit on the p95 is charted on each window's p95, and so on."""
    if spec is None:
        return None
    lim = spec.limit(metric)
    if lim is None:
        return None
    p = lim.percentile
    stat = "max" if p >= 100 else ("p95" if p >= 75 else "p50")
    return lim.max_value, stat, p


# -- coarsening a long series: the remedian (P. J. Rousseeuw and G. W. Bassett, "The remedian: a robust
# averaging method for large data sets", Journal of the American Statistical Association 85 (1990) 97-104):
# windows are grouped 3 at a time, each group's statistic the median of its 3 members, and groups of
# groups the same way, level after level. A group's figures never change once it is complete, so a
# series fed one window at a time (the recorder) keeps at most DRIFT_POINTS groups and 2 unfinished
# ones per level, whatever the length of the run, and gives the same points as the whole series at once
# (the dashboard).
COARSE_BASE = 3


def _median3(v: np.ndarray) -> np.ndarray:
    """The median of each row of an (m, 3) array with NaN left out (NaN where a row has no value)."""
    s = np.sort(v, axis=1)  # NaN sorts last
    c = np.count_nonzero(~np.isnan(v), axis=1)
    out = np.full(len(v), np.nan)
    out[c == 3] = s[c == 3, 1]
    out[c == 2] = (s[c == 2, 0] + s[c == 2, 1]) / 2
    out[c == 1] = s[c == 1, 0]
    return out


def _coarse_level(n: int, points: int) -> int:
    """The lowest level whose groups (COARSE_BASE**level windows each) number at most `points`."""
    level = 0
    while -(-n // COARSE_BASE**level) > points:
        level += 1
    return level


def _tail_window(tail: list[tuple]) -> tuple:
    """The unfinished last group, from its finished parts (lo, hi, count, value) in cycle order: their
    first cycle, last cycle, total count and the median of their values."""
    vals = np.array([g[3] for g in tail], np.float64)
    vals = vals[~np.isnan(vals)]
    return (
        tail[0][0],
        tail[-1][1],
        sum(g[2] for g in tail),
        float(np.median(vals)) if len(vals) else math.nan,
    )


def _as_windows(lo, hi, cnt, val, tail: list[tuple]) -> np.ndarray:
    n = len(lo) + (1 if tail else 0)
    out = np.zeros(n, WINDOW_DTYPE)
    out["cycle_start"][: len(lo)] = lo
    out["cycle_end"][: len(lo)] = np.asarray(hi, np.int64) + 1
    out["count"][: len(lo)] = cnt
    out["value"][: len(lo)] = val
    if tail:
        t = _tail_window(tail)
        out[-1] = (t[0], t[1] + 1, t[2], t[3])
    return out


def _coarse_parts(cycle_lo, cycle_hi, count, value, points: int):
    """(level, the finished groups of that level as arrays (lo, hi, count, value), the unfinished
    groups of each lower level (a list per level, level 0 first, each group a tuple)) of the windows
    with data."""
    ok = np.asarray(count) > 0
    groups = (
        np.asarray(cycle_lo, np.int64)[ok],
        np.asarray(cycle_hi, np.int64)[ok],
        np.asarray(count, np.int64)[ok],
        np.asarray(value, np.float64)[ok],
    )
    level = _coarse_level(len(groups[0]), points)
    pending: list[list[tuple]] = []
    for _ in range(level):
        lo, hi, cnt, val = groups
        m = len(lo) // COARSE_BASE
        k = m * COARSE_BASE
        pending.append([(int(lo[i]), int(hi[i]), int(cnt[i]), float(val[i])) for i in range(k, len(lo))])
        groups = (
            lo[:k:COARSE_BASE],
            hi[COARSE_BASE - 1 : k : COARSE_BASE],
            cnt[:k].reshape(m, COARSE_BASE).sum(axis=1),
            _median3(val[:k].reshape(m, COARSE_BASE)),
        )
    return level, groups, pending


def coarse_windows(
    cycle_lo: np.ndarray,
    cycle_hi: np.ndarray,
    count: np.ndarray,
    value: np.ndarray,
    points: int = DRIFT_POINTS,
) -> np.ndarray:
    """Rollup windows (inclusive cycle spans, counts, one statistic) as WINDOW_DTYPE, windows without
    data left out. A series of more than `points` windows is coarsened by the remedian (see above) to
    groups of 3**level windows, the lowest level that leaves at most `points` groups; an unfinished last
    group takes the median of its finished parts. Fed window by window, `CoarseSeries` gives the same."""
    _, (lo, hi, cnt, val), pending = _coarse_parts(cycle_lo, cycle_hi, count, value, points)
    tail = [g for level in reversed(pending) for g in level]
    return _as_windows(lo, hi, cnt, val, tail)


class CoarseSeries:
    """One metric's windows fed one at a time, held as `coarse_windows` would coarsen them: at most
    `points` finished groups plus 2 unfinished ones a level, so its memory stays flat over any run."""

    __slots__ = ("points", "level", "n", "lo", "hi", "count", "value", "pending")

    def __init__(self, points: int = DRIFT_POINTS) -> None:
        self.points = points
        self.level = 0
        self.n = 0  # windows with data fed so far
        self.lo: list[int] = []
        self.hi: list[int] = []
        self.count: list[int] = []
        self.value: list[float] = []
        self.pending: list[list[tuple]] = []  # per level below `level`: its finished, ungrouped groups

    @classmethod
    def of(cls, cycle_lo, cycle_hi, count, value, points: int = DRIFT_POINTS) -> CoarseSeries:
        """A series that has already been fed these windows (a unit's earlier life)."""
        self = cls(points)
        self.level, (lo, hi, cnt, val), self.pending = _coarse_parts(cycle_lo, cycle_hi, count, value, points)
        self.lo, self.hi, self.count, self.value = lo.tolist(), hi.tolist(), cnt.tolist(), val.tolist()
        self.n = int(np.count_nonzero(np.asarray(count) > 0))
        return self

    def add(self, cycle_lo: int, cycle_hi: int, count: int, value: float) -> None:
        """The next window (a window without data is left out, as `coarse_windows` leaves it out)."""
        if count <= 0:
            return
        self.n += 1
        group: tuple | None = (int(cycle_lo), int(cycle_hi), int(count), float(value))
        for parts in self.pending:
            parts.append(group)
            if len(parts) < COARSE_BASE:
                group = None
                break
            group = self._merge(parts)
            parts.clear()
        if group is not None:
            self._append(group)
        if _coarse_level(self.n, self.points) > self.level:
            self._level_up()

    @staticmethod
    def _merge(parts: list[tuple]) -> tuple:
        return (
            parts[0][0],
            parts[-1][1],
            sum(p[2] for p in parts),
            float(_median3(np.array([[p[3] for p in parts]], np.float64))[0]),
        )

    def _append(self, group: tuple) -> None:
        self.lo.append(group[0])
        self.hi.append(group[1])
        self.count.append(group[2])
        self.value.append(group[3])

    def _level_up(self) -> None:
        groups = list(zip(self.lo, self.hi, self.count, self.value, strict=True))
        k = len(groups) // COARSE_BASE * COARSE_BASE
        self.lo, self.hi, self.count, self.value = [], [], [], []
        for i in range(0, k, COARSE_BASE):
            self._append(self._merge(groups[i : i + COARSE_BASE]))
        self.pending.append(groups[k:])
        self.level += 1

    def windows(self) -> np.ndarray:
        """The series as `coarse_windows` gives it (WINDOW_DTYPE)."""
        tail = [g for level in reversed(self.pending) for g in level]
        return _as_windows(self.lo, self.hi, self.count, self.value, tail)


def judge_drift(
    windows: np.ndarray,
    limit: float | None,
    life_cycles: float | None = None,
    failed_at: int | None = None,
    *,
    quick: bool = False,
) -> DriftReport | None:
    """The drift of a unit's series (WINDOW_DTYPE, from `coarse_windows`) as the dashboard flags it:
    baseline the first quarter of the windows (5 to 20), a crossing judged within `drift_horizon`
    of the last window and the spec's required life. None with fewer than DRIFT_MIN_WINDOWS windows
    with data (or a baseline without spread to judge by). `DriftReport.confirmed` is the flag; `quick`
    (the recorder, which wants the flag only): no trend fitted where no chart signalled."""
    if np.count_nonzero(~np.isnan(windows["value"])) < DRIFT_MIN_WINDOWS:
        return None
    try:
        return drift(
            windows,
            limit=limit,
            baseline_windows=auto_baseline(len(windows)),
            horizon=drift_horizon(int(windows["cycle_end"][-1]), life_cycles),
            failed_at=failed_at,
            quick=quick,
        )
    except DataError:
        return None
