"""Extrapolating a bounce figure beyond the recorded worst case.

A debouncer that was clean on n recorded actuations may still fail on the next million. Each debouncer
fails when a per-actuation bounce figure (bounce time, longest excursion, time in the old state) exceeds
what its parameter covers, so its false-transition rate per actuation is the tail probability of that
figure. The tail is fitted:

- with at least 500 actuations (50 exceedances): a generalized Pareto distribution on the exceedances
  over the 90th percentile (peaks over threshold; Pickands 1975, Balkema and de Haan 1974), fitted by
  probability weighted moments (Hosking and Wallis, Technometrics 29(3), 1987), closed form and fast
  enough to bootstrap;
- with 20 to 499: a lognormal on the non-zero values (times the fraction non-zero);
- with fewer: no model, only the distribution-free bound below.

The confidence of an estimate comes from the data: a bootstrap (exceedances resampled, their count
drawn binomially; for the lognormal, the sampling distributions of its mean and variance) gives the
upper 95 % bound. Independently of any model, n clean actuations bound the rate by
`1 - 0.05 ** (1 / n)` at 95 % (the exact binomial bound for zero events, about 3 / n).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

GPD_MIN = 500
LOGNORMAL_MIN = 20
_BOOT = 200


def _stats():
    """scipy.stats, imported on first use: the analog package and the demo import this module's
    package without fitting a tail (scipy.stats costs a process over a second of CPU to import)."""
    from scipy import stats

    return stats


def zero_event_bound(n: int, confidence: float = 0.95) -> float:
    """Upper bound on a per-trial probability after `n` trials without an event."""
    if n <= 0:
        return 1.0
    return float(1.0 - (1.0 - confidence) ** (1.0 / n))


def gpd_pwm(y: np.ndarray) -> tuple[float, float]:
    """(shape xi, scale) of a generalized Pareto fitted to exceedances `y` >= 0 by PWM.

    `xi` uses scipy's sign convention (`scipy.stats.genpareto` c): xi > 0 is a heavy tail.
    Works along the last axis when `y` is 2-D (rows are samples); `y` must be sorted ascending.
    """
    y = np.asarray(y, np.float64)
    n = y.shape[-1]
    i = np.arange(n, dtype=np.float64)
    b0 = y.mean(axis=-1)
    b1 = (y * (i / max(n - 1, 1))).sum(axis=-1) / n
    return _pwm(b0, b1)


def _boot_pwm(y: np.ndarray, idx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """`gpd_pwm` of every resample `y[idx[r]]` (rows of indices into sorted `y`), without sorting them:
    a resample holding `y[j]` `c` times, after `s` smaller draws, puts it at sorted ranks s .. s + c - 1,
    so its share of b1 is `y[j] * (c * s + c * (c - 1) / 2) / (n - 1)`. Linear in the draws, where
    sorting each resample cost n log n (a night's fits spent seconds there)."""
    boots, n = idx.shape
    b0 = np.empty(boots)
    b1 = np.empty(boots)
    step = max(1, (1 << 22) // max(n, 1))
    for lo in range(0, boots, step):
        rows = idx[lo : lo + step]
        k = len(rows)
        c = np.bincount((rows + (np.arange(k) * n)[:, None]).ravel(), minlength=k * n).reshape(k, n)
        c = c.astype(np.float64)
        before = np.cumsum(c, axis=1) - c
        b0[lo : lo + k] = (c @ y) / n
        b1[lo : lo + k] = ((c * before + c * (c - 1) / 2) @ y) / (n * max(n - 1, 1))
    return _pwm(b0, b1)


def _pwm(b0, b1):
    a1 = b0 - b1
    denom = b0 - 2.0 * a1
    with np.errstate(divide="ignore", invalid="ignore"):
        k = b0 / denom - 2.0
        scale = 2.0 * b0 * a1 / denom
    return -k, scale


@dataclass(frozen=True, slots=True, eq=False)
class Tail:
    """A fitted tail of one bounce figure (values in ns)."""

    model: str  # "generalized Pareto", "lognormal" or "none"
    n: int
    values: np.ndarray = field(repr=False)
    threshold: float = np.nan  # GPD: the exceedance threshold
    frac: float = np.nan  # GPD: fraction above threshold; lognormal: fraction non-zero
    shape: float = np.nan  # GPD xi; lognormal sigma of ln
    scale: float = np.nan  # GPD scale; lognormal mu of ln
    boot: np.ndarray = field(default_factory=lambda: np.zeros((0, 3)), repr=False)  # (frac, shape, scale)

    def describe(self) -> str:
        if self.model == "generalized Pareto":
            return (
                f"generalized Pareto above the 90th percentile ({self.threshold / 1e6:.3g} ms), "
                f"{int(round(self.frac * self.n))} of {self.n} exceedances, shape {self.shape:.3g}"
            )
        if self.model == "lognormal":
            return f"lognormal fitted to {int(round(self.frac * self.n))} non-zero of {self.n} values"
        return f"no tail model ({self.n} actuations; {LOGNORMAL_MIN} needed)"

    def _sf(self, x: np.ndarray, frac, shape, scale) -> np.ndarray:
        if self.model == "generalized Pareto":
            tail = frac * _stats().genpareto.sf(np.maximum(x - self.threshold, 0.0), shape, scale=scale)
            emp = np.mean(self.values[None, :] > np.atleast_1d(x)[:, None], axis=1).reshape(np.shape(x))
            return np.where(x > self.threshold, tail, emp)
        if self.model == "lognormal":
            with np.errstate(divide="ignore"):
                z = (np.log(np.maximum(x, 1e-300)) - scale) / shape
            return frac * _stats().norm.sf(z)
        return np.mean(self.values[None, :] > np.atleast_1d(x)[:, None], axis=1).reshape(np.shape(x))

    def sf(self, x: float | np.ndarray) -> np.ndarray:
        """Estimated probability that one actuation's figure exceeds `x` ns."""
        return self._sf(np.asarray(x, np.float64), self.frac, self.shape, self.scale)

    def sf_upper(self, x: float, confidence: float = 0.95) -> float:
        """Upper `confidence` bootstrap bound of `sf(x)` (the zero-event bound when there is no model)."""
        if self.model == "none" or len(self.boot) == 0:
            return max(float(self.sf(x)), zero_event_bound(self.n, confidence))
        est = np.array([float(self._sf(np.asarray(x, np.float64), f, s, c)) for f, s, c in self.boot])
        return float(np.nanquantile(est, confidence))

    def isf(self, p: float) -> float:
        """Smallest figure (ns) whose estimated exceedance probability is at most `p`."""
        if self.model == "generalized Pareto" and p < self.frac:
            return float(self.threshold + _stats().genpareto.isf(p / self.frac, self.shape, scale=self.scale))
        if self.model == "lognormal":
            if p >= self.frac:
                return 0.0
            return float(np.exp(self.scale + self.shape * _stats().norm.isf(p / self.frac)))
        return float(np.quantile(self.values, 1.0 - p)) if len(self.values) else 0.0


def fit_tail(values: np.ndarray, seed: int = 0) -> Tail:
    """Fit the tail of one bounce figure (ns) of n actuations (see module doc)."""
    v = np.sort(np.asarray(values, np.float64)[np.isfinite(values)])
    n = len(v)
    rng = np.random.default_rng(seed)
    if n >= GPD_MIN:
        u = float(np.quantile(v, 0.9))
        y = v[v > u] - u
        if len(y) >= 20 and np.ptp(y) > 0:
            xi, sc = gpd_pwm(y)
            frac = len(y) / n
            bxi, bsc = _boot_pwm(y, rng.integers(0, len(y), (_BOOT, len(y))))
            bfrac = rng.binomial(n, frac, _BOOT) / n
            boot = np.column_stack((bfrac, bxi, bsc))
            boot = boot[np.isfinite(boot).all(axis=1) & (boot[:, 2] > 0)]
            return Tail("generalized Pareto", n, v, u, frac, float(xi), float(sc), boot)
    pos = v[v > 0]
    if n >= LOGNORMAL_MIN and len(pos) >= LOGNORMAL_MIN // 2 and np.ptp(pos) > 0:
        logs = np.log(pos)
        m = len(pos)
        mu, sigma = float(logs.mean()), float(logs.std(ddof=1))
        bsig = sigma * np.sqrt(rng.chisquare(m - 1, _BOOT) / (m - 1))
        bmu = mu + sigma / np.sqrt(m) * rng.standard_normal(_BOOT)
        bfrac = rng.binomial(n, m / n, _BOOT) / n
        return Tail("lognormal", n, v, np.nan, m / n, sigma, mu, np.column_stack((bfrac, bsig, bmu)))
    return Tail("none", n, v)
