"""Bounds on a population's pooled percentile (and on its mean and sd, Ppk, percentile index and share
beyond a limit, `benchlog.stats.capability` and `share_beyond`) from a random-unit-effect model.

Each unit scales a common shape: a value of unit u is `m_u * r`, where `m_u` (the unit's median) is
log-normal across the units of a supplier, and `r` (a value divided by its unit's median) has one
distribution for all units, known from the pooled residuals of every actuation recorded. The
population's p-th percentile is then the quantile of the mixture

    F(x) = E_Z[ F_r(x / exp(mu + sigma Z)) ],   Z ~ N(0, 1),

evaluated exactly over Z as the mean over the residuals of Phi((log x - mu - log r) / sigma) (the
residuals summarised by 256 of their quantiles) and solved by bisection on log x.

The uncertainty is carried by the unit-level parameters (mu, sigma), estimated from the n unit medians
(mean ybar and variance s^2 of their logs), through their generalized pivotal quantities. A unit's
recorded median is its true median times the sampling error of a median of m_u actuations, so the
log medians vary by sigma^2 + tau^2, where tau^2 (the mean over units of the variance of a log median
of m_u residuals) is what the unit-to-unit variance must not be credited with. As for the one-way
random model's between-unit variance (Krishnamoorthy and Mathew, *Technometrics* 46, 2004, 44-52,
one-sided tolerance limits in balanced and unbalanced one-way random models; from memory):

    v* = s^2 (n - 1) / U,  U ~ chi-square(n - 1);   sigma* = sqrt(max(v* - tau^2, 0));
    mu* = ybar - Z sqrt(v* / n)

(generalized pivotal quantities: Weerahandi, *Journal of the American Statistical Association* 88,
1993; Krishnamoorthy and Mathew, *Statistical Tolerance Regions*, Wiley 2009, ch. 2 and 5). tau^2 is
taken as known: it is estimated from every actuation of every unit, far more precisely than s^2 from n
medians. The variance of a sample median is that of the order statistic Q_r(B), B ~ Beta(k, m + 1 - k)
with k = (m + 1) / 2, over the residuals' quantile function Q_r (Maritz and Jarrett, *Journal of the
American Statistical Association* 73, 1978, 194-196; from memory), evaluated on the pooled residuals,
since every unit shares their shape. Ignoring tau^2 (as this model did before) counted the medians'
sampling noise twice, in sigma and in the residuals, and set the pooled p95 high by about 0.4 % with
100 actuations a unit; harmless beside the uncertainty of 8 units, it pushed the lower bound of 32
units above the truth too often (tests/benchmarks/bench_calibration.py; docs/qualification.md).

The bounds are quantiles of the percentile computed at each draw. With no within-unit spread (tau^2 =
0) this is the exact one-sided normal tolerance bound ybar + k s, whose factor k the tests check
against the noncentral t distribution. Resampling the units
instead (the cluster bootstrap) falls short of nominal with 8 to 16 units in the calibration harness
(tests/benchmarks/bench_calibration.py; docs/qualification.md quotes both): its intervals miss the
large units a small sample seldom draws.
"""

from __future__ import annotations

import math

import numpy as np

_ITERATIONS = 40  # bisection steps on log x
_RESIDUAL_POINTS = 256  # the residual distribution as this many of its quantiles
_SIGMA_GRID = 97  # G(sigma) tabulated at this many sigmas from 0 to the largest drawn
_MEDIAN_NODES = 128  # the sample median's Beta distribution as this many of its quantiles
_TAIL_POINTS = 1024  # the residuals for a share beyond a limit: finer, down to a share of 1 in 2,000

METHOD = "random unit effect (log-normal unit medians), generalized pivotal bounds"


class UnitEffect:
    """The model fitted to one unit-tagged sample (values > 0 at every unit's median)."""

    def __init__(
        self, values: np.ndarray, unit: np.ndarray, n_units: int, weights: np.ndarray | None = None
    ) -> None:
        """`weights` (optional): how many times each value occurred; the fit is then exactly the fit
        to the values repeated that many times (a sample read from the store's summaries)."""
        order = np.lexsort((values, unit))
        v = values[order]
        w = None if weights is None else np.asarray(weights, np.float64)[order]
        bounds = np.searchsorted(unit[order], np.arange(n_units + 1))
        spans = list(zip(bounds[:-1], bounds[1:], strict=True))
        if w is None:
            med = np.array([np.median(v[a:b]) for a, b in spans])
            counts = np.diff(bounds).astype(np.float64)
        else:
            med = np.array([_repeated_quantiles(v[a:b], w[a:b], np.array([0.5]))[0] for a, b in spans])
            counts = np.array([w[a:b].sum() for a, b in spans])
        if not (med > 0).all():
            raise ValueError("a unit's median is not positive")
        q = (np.arange(_RESIDUAL_POINTS) + 0.5) / _RESIDUAL_POINTS
        qt = (np.arange(_TAIL_POINTS) + 0.5) / _TAIL_POINTS
        ratio = values / med[unit]
        if weights is None:
            r = np.quantile(ratio, q)
            r_fine = np.quantile(ratio, qt)
        else:
            o = np.argsort(ratio, kind="stable")
            r = _repeated_quantiles(ratio[o], np.asarray(weights, np.float64)[o], q)
            r_fine = _repeated_quantiles(ratio[o], np.asarray(weights, np.float64)[o], qt)
        y = np.log(med)
        spread = float(y.std(ddof=1)) if n_units > 1 else 0.0
        self._set(float(y.mean()), spread, n_units, r, float(median_noise(r, counts).mean()))
        wr = np.ones(len(ratio)) if weights is None else np.asarray(weights, np.float64)
        self.r_moments = (float(wr @ ratio) / wr.sum(), float(wr @ (ratio * ratio)) / wr.sum())
        with np.errstate(divide="ignore"):
            self._log_r_fine = np.log(r_fine)

    @classmethod
    def from_parts(cls, mu: float, sigma: float, n_units: int, residuals: np.ndarray) -> UnitEffect:
        """The model with its parameters given (for planning: residuals known, no sample; `sigma` is the
        unit medians' log-sd, with no sampling noise of the medians in it)."""
        self = cls.__new__(cls)
        r = np.sort(np.asarray(residuals, np.float64))
        self._set(mu, sigma, n_units, r, 0.0)
        self.r_moments = (float(r.mean()), float((r * r).mean()))
        self._log_r_fine = self._log_r
        return self

    def _set(self, mu: float, spread: float, n_units: int, r: np.ndarray, noise: float) -> None:
        self.n = n_units
        self.mu = mu
        self.spread = spread  # log-sd of the recorded unit medians: sigma and their sampling noise
        self.noise = noise  # tau^2: the part of spread^2 that is the medians' sampling noise
        self.sigma = math.sqrt(max(spread * spread - noise, 0.0))  # between units alone
        self.residuals = r
        with np.errstate(divide="ignore"):
            self._log_r = np.log(r)
        positive = r[r > 0]
        self._log_r_min = float(np.log(positive[0])) if len(positive) else 0.0

    @classmethod
    def of(cls, sample) -> UnitEffect | None:
        """The model for a `UnitSample`, or None where it does not apply (a unit's median is 0)."""
        try:
            return cls(sample.values, sample.unit, sample.n_units, getattr(sample, "weights", None))
        except ValueError:
            return None

    def draws(self, count: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
        """Generalized pivotal draws of (mu, sigma)."""
        n = self.n
        u = rng.chisquare(n - 1, count)
        z = rng.standard_normal(count)
        return pivots(self.mu, self.spread, self.noise, n, u, z)

    def quantile(self, mu: np.ndarray, sigma: np.ndarray, percentile: float) -> np.ndarray:
        """The mixture's percentile for each (mu, sigma): exp(mu) G(sigma), where G(sigma) is the
        percentile of r exp(sigma Z), tabulated on a grid of sigma and interpolated."""
        mu = np.atleast_1d(np.asarray(mu, np.float64))
        sigma = np.atleast_1d(np.asarray(sigma, np.float64))
        top = float(sigma.max()) if len(sigma) else 0.0
        grid = np.linspace(0.0, top, _SIGMA_GRID) if top > 0 else np.zeros(1)
        g = self.scale_quantile(grid, percentile / 100.0)
        return np.exp(mu + np.interp(sigma, grid, g))

    def scale_quantile(self, sigma: np.ndarray, p: float) -> np.ndarray:
        """log of the p-quantile of r exp(sigma Z) for each sigma, by bisection."""
        from scipy.special import ndtr, ndtri

        s = np.maximum(sigma, 1e-12)
        spread = (8.0 + abs(float(ndtri(p)))) * s
        lo = self._log_r_min - spread - 1e-9
        hi = float(np.log(self.residuals[-1])) + spread + 1e-9
        log_r = self._log_r[None, :]
        for _ in range(_ITERATIONS):
            mid = 0.5 * (lo + hi)
            cdf = ndtr((mid[:, None] - log_r) / s[:, None]).mean(axis=1)
            below = cdf < p
            lo = np.where(below, mid, lo)
            hi = np.where(below, hi, mid)
        return 0.5 * (lo + hi)

    def percentile_draws(self, percentile: float, count: int, seed) -> np.ndarray:
        mu, sigma = self.draws(count, np.random.default_rng(seed))
        return self.quantile(mu, sigma, percentile)

    def moments(self, mu: np.ndarray, sigma: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(mean, sd) of the mixture for each (mu, sigma): a value is m r with m = exp(mu + sigma Z)
        independent of r, and E m^k = exp(k mu + k^2 sigma^2 / 2) (the log-normal's moments), so
        E X = exp(mu + sigma^2 / 2) E r and E X^2 = exp(2 mu + 2 sigma^2) E r^2 (E r, E r^2 over every
        recorded value's ratio to its unit's median)."""
        r1, r2 = self.r_moments
        mu, v = np.asarray(mu, np.float64), np.square(np.asarray(sigma, np.float64))
        mean = np.exp(mu + v / 2) * r1
        second = np.exp(2 * mu + 2 * v) * r2
        return mean, np.sqrt(np.maximum(second - mean * mean, 0.0))

    def share_above(self, mu: np.ndarray, sigma: np.ndarray, limit: float) -> np.ndarray:
        """1 - F(limit) of the mixture for each (mu, sigma): the mean over the residuals (as 1,024 of
        their quantiles: a share of a few in 10,000 lies beyond the 256 the percentiles use) of
        Phi((log r + mu - log limit) / sigma) (a step where sigma is 0)."""
        from scipy.special import ndtr

        mu = np.atleast_1d(np.asarray(mu, np.float64))[:, None]
        sigma = np.atleast_1d(np.asarray(sigma, np.float64))[:, None]
        log_r = self._log_r_fine[None, :]
        out = np.empty(len(mu))
        for i in range(0, len(mu), 256):  # 256 draws at a time: a few MB, not the whole matrix
            m, sd = mu[i : i + 256], sigma[i : i + 256]
            with np.errstate(divide="ignore", invalid="ignore"):
                p = np.where(sd > 0, ndtr((log_r + m - math.log(limit)) / sd), log_r + m > math.log(limit))
            out[i : i + 256] = p.mean(axis=1)
        return out


def pivots(ybar, spread, noise: float, n: int, u: np.ndarray, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(mu*, sigma*) from the log medians' mean `ybar` and sd `spread` (arrays broadcast with `u`, `z`),
    `noise` = tau^2 their sampling noise's variance, U ~ chi-square(n - 1), Z ~ N(0, 1)."""
    v = np.square(spread) * (n - 1) / u
    return ybar - z * np.sqrt(v / n), np.sqrt(np.maximum(v - noise, 0.0))


def median_noise(residuals: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """Variance of the log of a sample median of `counts` values (each) drawn from the residual
    distribution given by its sorted quantiles `residuals` (at (i + 0.5) / len): the median is the
    order statistic Q_r(B), B ~ Beta(k, m + 1 - k), k = (m + 1) / 2 (for an even m, the mean of the two
    middle values, taken as the same Beta: a half-rank's difference), evaluated at the Beta's quantiles
    (Maritz and Jarrett, JASA 73, 1978; from memory). 0 for a unit of no values."""
    from scipy.special import betaincinv

    counts = np.asarray(counts, np.float64)
    out = np.zeros(len(counts))
    r = np.asarray(residuals, np.float64)
    positive = r[r > 0]
    if len(positive) == 0:
        return out
    grid = (np.arange(len(r)) + 0.5) / len(r)
    log_r = np.log(np.maximum(r, positive[0]))
    nodes = (np.arange(_MEDIAN_NODES) + 0.5) / _MEDIAN_NODES
    sizes, where = np.unique(counts, return_inverse=True)
    for i, m in enumerate(sizes):
        if m < 1:
            continue
        a = (m + 1.0) / 2.0
        b = betaincinv(a, a, nodes)
        out[where == i] = float(np.interp(b, grid, log_r).var())
    return out


def _repeated_quantiles(v: np.ndarray, w: np.ndarray, q: np.ndarray) -> np.ndarray:
    """numpy's default (linear) quantiles `q` of sorted values `v`, each repeated `w` times (whole
    counts), without building the repeated array."""
    cum = np.cumsum(w)
    h = (cum[-1] - 1.0) * q
    lo, hi = np.floor(h), np.ceil(h)
    last = len(v) - 1
    a = v[np.minimum(np.searchsorted(cum, lo, side="right"), last)]
    b = v[np.minimum(np.searchsorted(cum, hi, side="right"), last)]
    return a + (h - lo) * (b - a)


def bounds(draws: np.ndarray, confidence: float) -> tuple[float, float]:
    """One-sided bounds at `confidence` each from pivotal draws."""
    d = draws[np.isfinite(draws)]
    lo, hi = np.quantile(d, [1.0 - confidence, confidence])
    return float(lo), float(hi)
