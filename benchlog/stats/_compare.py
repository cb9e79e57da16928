"""Comparing populations of units on one metric, with the *unit* as the experimental unit.

A million actuations of 16 units are 16 independent draws of "a unit from this supplier", each seen a
great many times, not a million independent draws: actuations of one unit share its build, its
adjustment and its wear. So:

- tests between populations (Mann-Whitney, Kolmogorov-Smirnov, Anderson-Darling k-sample) compare
  one summary per unit (its p95, say), so their sample size is the number of units;
- bounds on a population's pooled percentile, and on the ratio of two, come from a random-unit-effect
  model with generalized pivotal quantities (`_unit_effect`): the cluster bootstrap fell short of its
  stated confidence with 8 to 32 units in the calibration harness;
- intervals for a mean, share beyond a limit or capability index (and a percentile of counts whose
  unit medians are 0) come from a cluster bootstrap: scipy's `bootstrap` resamples the *units* with
  replacement and each resample pools all actuations of the units drawn, so between-unit spread is in
  the interval.

The pooled statistics are computed from per-unit cumulative counts on a common grid of values, so a
resample is one matrix product, not a concatenation of millions of values.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy import stats

from benchlog.errors import DataError
from benchlog.stats._life import exact_binomial_bounds
from benchlog.stats._unit_effect import METHOD as EFFECT_METHOD
from benchlog.stats._unit_effect import UnitEffect
from benchlog.stats._unit_effect import bounds as effect_bounds

__all__ = [
    "UnitSample",
    "Interval",
    "UnitTests",
    "Capability",
    "Share",
    "pooled_percentile",
    "percentile_ratio",
    "pooled_mean",
    "mean_ratio",
    "mean_difference",
    "unit_tests",
    "capability",
    "share_beyond",
    "PERCENTILE_INDEX_TAIL",
]

PERCENTILE_INDEX_TAIL = 99.865  # the normal distribution's mean + 3 sigma, as a percentile
_MAX_GRID = 6000
_METHOD = "cluster bootstrap over units, expanded percentile interval"
_BATCH = 250


@dataclass(frozen=True, eq=False)
class UnitSample:
    """Values of one metric in one population, each tagged with the unit it came from.

    `weights` (optional) says how many times each value occurred: a sample read from the store's
    distribution summaries is one value per occupied histogram bin with its exact count. Every
    statistic treats a value of weight k as k equal values."""

    values: np.ndarray  # float64
    unit: np.ndarray  # int64 codes 0 .. n_units - 1
    unit_names: tuple[str, ...]
    weights: np.ndarray | None = None  # float64 counts, None = 1 each
    # exact per-unit sum and sum of squares (2, n_units) when the values are a summary's bins
    moments: np.ndarray | None = None

    @classmethod
    def of(cls, values, units, weights=None) -> UnitSample:
        v = np.asarray(values, dtype=np.float64)
        u = np.asarray(units)
        if v.shape != u.shape or v.ndim != 1:
            raise DataError("values and unit labels must be one-dimensional and of equal length")
        keep = np.isfinite(v)
        w = None
        if weights is not None:
            w = np.asarray(weights, dtype=np.float64)
            if w.shape != v.shape:
                raise DataError("one weight per value is needed")
            keep &= w > 0
            w = w[keep]
        v, u = v[keep], u[keep]
        names, codes = np.unique(u.astype(str), return_inverse=True)
        return cls(v, codes.astype(np.int64), tuple(str(n) for n in names), w)

    @property
    def n_units(self) -> int:
        return len(self.unit_names)

    def __len__(self) -> int:
        return len(self.values) if self.weights is None else int(round(self.weights.sum()))

    def unit_sums(self, values: np.ndarray | None = None, *, power: int = 1) -> np.ndarray:
        """Per unit: the sum of `values` (default: the sample's own values to `power`, exact when the
        sample carries its moments), each counted by its weight."""
        if values is None:
            if self.moments is not None:
                return self.moments[power - 1]
            values = self.values if power == 1 else self.values**power
        w = values if self.weights is None else values * self.weights
        return np.bincount(self.unit, w, self.n_units)

    def unit_counts(self) -> np.ndarray:
        """Per unit: how many values (weights included), as float64."""
        return np.bincount(self.unit, self.weights, self.n_units).astype(np.float64)

    def per_unit(self, percentile: float) -> np.ndarray:
        """Each unit's own percentile (one summary value per unit)."""
        order = np.lexsort((self.values, self.unit))
        v = self.values[order]
        bounds = np.searchsorted(self.unit[order], np.arange(self.n_units + 1))
        if self.weights is None:
            return np.array(
                [np.percentile(v[a:b], percentile) for a, b in zip(bounds[:-1], bounds[1:], strict=True)]
            )
        w = self.weights[order]
        return np.array(
            [
                _weighted_percentile(v[a:b], w[a:b], percentile)
                for a, b in zip(bounds[:-1], bounds[1:], strict=True)
            ]
        )

    def pooled_cdf(self) -> _PooledCdf:
        """The per-unit cumulative counts the bootstrap works on (built once per sample)."""
        cdf = self.__dict__.get("_cdf")
        if cdf is None:
            cdf = _PooledCdf(self)
            object.__setattr__(self, "_cdf", cdf)
        return cdf

    def unit_effect(self) -> UnitEffect | None:
        """The random-unit-effect model of this sample (`UnitEffect.of`, built once per sample: the
        percentiles, their ratio, capability and the share beyond a limit all draw from it), or None
        where it does not apply."""
        if "_effect" not in self.__dict__:
            object.__setattr__(self, "_effect", UnitEffect.of(self))
        return self.__dict__["_effect"]

    def per_unit_mean(self) -> np.ndarray:
        return self.unit_sums() / self.unit_counts()


def _weighted_percentile(v: np.ndarray, w: np.ndarray, percentile: float) -> float:
    """numpy's default (linear) percentile of sorted values `v` each repeated `w` times."""
    cum = np.cumsum(w)
    h = (cum[-1] - 1.0) * percentile / 100.0
    lo, hi = np.floor(h), np.ceil(h)
    a = v[min(int(np.searchsorted(cum, lo, side="right")), len(v) - 1)]
    b = v[min(int(np.searchsorted(cum, hi, side="right")), len(v) - 1)]
    return float(a + (h - lo) * (b - a))


@dataclass(frozen=True)
class Interval:
    """A point estimate with bounds: `low` and `high` are each one-sided at `confidence` (so together a
    two-sided interval at 2 * confidence - 1)."""

    estimate: float
    low: float
    high: float
    confidence: float
    units: int
    method: str


class _PooledCdf:
    """Per-unit cumulative counts on a grid of values: pooled quantiles for any unit weights."""

    def __init__(self, sample: UnitSample) -> None:
        if sample.n_units == 0:
            raise DataError("no measured values")
        pooled = np.unique(sample.values)
        if len(pooled) > _MAX_GRID:
            p = np.unique(
                np.concatenate([np.linspace(0, 1, _MAX_GRID // 2), 1 - np.logspace(-6, -1, _MAX_GRID // 2)])
            )
            pooled = np.unique(np.quantile(sample.values, p, method="inverted_cdf", weights=sample.weights))
        self.grid = pooled
        order = np.lexsort((sample.values, sample.unit))
        v = sample.values[order]
        bounds = np.searchsorted(sample.unit[order], np.arange(sample.n_units + 1))
        if sample.weights is None:
            self.counts = np.stack(
                [
                    np.searchsorted(v[a:b], self.grid, side="right")
                    for a, b in zip(bounds[:-1], bounds[1:], strict=True)
                ]
            ).astype(np.float64)
            self.n = np.diff(bounds).astype(np.float64)
        else:
            cw = np.cumsum(sample.weights[order])
            at = np.stack(
                [
                    a + np.searchsorted(v[a:b], self.grid, side="right")
                    for a, b in zip(bounds[:-1], bounds[1:], strict=True)
                ]
            )
            base = np.r_[0.0, cw][bounds[:-1]]
            self.counts = np.r_[0.0, cw][at] - base[:, None]
            self.n = np.r_[0.0, cw][bounds[1:]] - base
        self._windows: dict[float, tuple[int, int]] = {}

    def _window(self, percentile: float) -> tuple[int, int]:
        """Grid slice that holds the pooled quantile for *any* unit weights: a mixture's quantile lies
        between the smallest and the largest of its components' quantiles."""
        win = self._windows.get(percentile)
        if win is None:
            hit = self.counts >= (percentile / 100.0) * self.n[:, None]
            first = np.where(hit.any(axis=1), hit.argmax(axis=1), len(self.grid) - 1)
            win = (max(int(first.min()) - 1, 0), int(first.max()))
            self._windows[percentile] = win
        return win

    def quantile(self, weights: np.ndarray, percentile: float) -> np.ndarray:
        """The q-quantile of the pooled values with each unit's values counted `weights[u]` times: the
        inverse of the pooled ECDF drawn linearly between the values present (for distinct values,
        numpy's 'interpolated_inverted_cdf')."""
        weights = np.asarray(weights, dtype=np.float64)
        shape = weights.shape[:-1]
        weights = weights.reshape(-1, weights.shape[-1])
        a, b = self._window(percentile)
        cum = weights @ self.counts[:, a : b + 1]  # (..., window)
        target = (weights @ self.n) * (percentile / 100.0)
        local = np.minimum((cum < target[..., None]).sum(axis=-1), b - a)
        hi = self.grid[a + local]
        c_hi = np.take_along_axis(cum, local[..., None], -1)[..., 0]
        c_lo = np.take_along_axis(cum, np.maximum(local - 1, 0)[..., None], -1)[..., 0]
        c_lo = np.where(local == 0, 0.0, c_lo)
        # the value present just below: where the count first reached c_lo (grid points of units
        # with weight 0 lie in between and must be skipped)
        first = (cum < c_lo[..., None]).sum(axis=-1)
        lo = self.grid[a + first]
        outside = (local > 0) & (first == 0) & (a > 0)
        if np.any(outside):  # that value lies left of the window: search the whole grid for these
            full = weights[outside] @ self.counts
            lo[outside] = self.grid[(full < c_lo[outside][..., None]).sum(axis=-1)]
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.where(c_hi > c_lo, (target - c_lo) / (c_hi - c_lo), 1.0)
        return np.where(c_lo <= 0, hi, lo + np.clip(frac, 0.0, 1.0) * (hi - lo)).reshape(shape)


def _weights(idx: np.ndarray, n_units: int) -> np.ndarray:
    """Resampled unit indices (..., n) -> how many times each unit was drawn (..., n_units)."""
    return (idx[..., :, None] == np.arange(n_units)).sum(axis=-2).astype(np.float64)


def _check_units(*samples: UnitSample, min_units: int = 3) -> None:
    for s in samples:
        if s.n_units < min_units:
            units = "1 unit" if s.n_units == 1 else f"{s.n_units} units"
            raise DataError(f"{units} measured: a population claim needs at least {min_units}")


def _expanded_level(two_sided: float, n: int) -> float:
    """Hesterberg's expanded percentile interval: widen the level so that its normal quantile is
    sqrt(n / (n - 1)) * t(n - 1), correcting the percentile bootstrap's narrowness with few clusters
    (Hesterberg, The American Statistician 69(4), 2015; from memory)."""
    alpha = 1.0 - two_sided
    z = math.sqrt(n / (n - 1)) * stats.t.ppf(1.0 - alpha / 2.0, n - 1)
    return float(2.0 * stats.norm.cdf(z) - 1.0)


def _bootstrap(samples, statistic, confidence, n_resamples, seed) -> tuple[float, float]:
    data = tuple(np.arange(s.n_units) for s in samples)
    level = _expanded_level(2.0 * confidence - 1.0, min(s.n_units for s in samples))
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        # constant or infinite replicates (no spread at all, Ppk of zero spread) are legitimate here
        warnings.simplefilter("ignore", stats.DegenerateDataWarning)
        warnings.simplefilter("ignore", RuntimeWarning)
        res = stats.bootstrap(
            data,
            statistic,
            vectorized=True,
            n_resamples=n_resamples,
            batch=_BATCH,
            confidence_level=level,
            method="percentile",
            rng=np.random.default_rng(seed),
        )
    return float(res.confidence_interval.low), float(res.confidence_interval.high)


def pooled_percentile(
    sample: UnitSample,
    percentile: float,
    *,
    confidence: float = 0.9,
    n_resamples: int = 2000,
    seed: int = 0,
    method: str = "auto",
) -> Interval:
    """The population's pooled percentile with one-sided bounds at `confidence`.

    `method`: "unit-effect" (generalized pivotal bounds of a log-normal random-unit-effect model,
    `benchlog.stats._unit_effect`), "bootstrap" (cluster bootstrap over units), or "auto": the first
    where every unit's median is positive (times), else the second (counts that are mostly 0).
    """
    _check_units(sample)
    cdf = sample.pooled_cdf()
    est = float(cdf.quantile(np.ones(sample.n_units), percentile))
    model = sample.unit_effect() if method in ("auto", "unit-effect") else None
    if model is not None:
        low, high = effect_bounds(model.percentile_draws(percentile, n_resamples, seed), confidence)
        return Interval(est, low, high, confidence, sample.n_units, EFFECT_METHOD)

    def stat(idx, axis=-1):
        return cdf.quantile(_weights(np.moveaxis(idx, axis, -1), sample.n_units), percentile)

    low, high = _bootstrap((sample,), stat, confidence, n_resamples, seed)
    return Interval(est, low, high, confidence, sample.n_units, _METHOD)


def _two_sample(candidate, reference, compare, confidence, n_resamples, seed) -> Interval:
    """`compare(weights_a, weights_b)` at unit weights 1, with its cluster-bootstrap interval."""
    est = float(compare(np.ones(candidate.n_units), np.ones(reference.n_units)))

    def stat(ia, ib, axis=-1):
        return compare(
            _weights(np.moveaxis(ia, axis, -1), candidate.n_units),
            _weights(np.moveaxis(ib, axis, -1), reference.n_units),
        )

    low, high = _bootstrap((candidate, reference), stat, confidence, n_resamples, seed)
    return Interval(est, low, high, confidence, min(candidate.n_units, reference.n_units), _METHOD)


def percentile_ratio(
    candidate: UnitSample,
    reference: UnitSample,
    percentile: float,
    *,
    confidence: float = 0.9,
    n_resamples: int = 2000,
    seed: int = 0,
    method: str = "auto",
) -> Interval:
    """Ratio of two populations' pooled percentiles (candidate / reference): the random-unit-effect
    model's pivotal draws of each (independent lots), else (`method="bootstrap"`, or a unit median of
    0) the cluster bootstrap."""
    _check_units(candidate, reference)
    ca, cb = candidate.pooled_cdf(), reference.pooled_cdf()
    models = (candidate.unit_effect(), reference.unit_effect()) if method != "bootstrap" else (None,)
    if all(m is not None for m in models):
        est = float(ca.quantile(np.ones(candidate.n_units), percentile)) / float(
            cb.quantile(np.ones(reference.n_units), percentile)
        )
        ss = np.random.SeedSequence(seed).spawn(2)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio_draws = models[0].percentile_draws(percentile, n_resamples, ss[0]) / models[
                1
            ].percentile_draws(percentile, n_resamples, ss[1])
        low, high = effect_bounds(ratio_draws, confidence)
        n = min(candidate.n_units, reference.n_units)
        return Interval(est, low, high, confidence, n, EFFECT_METHOD)

    def ratio(wa, wb):
        with np.errstate(divide="ignore", invalid="ignore"):
            return ca.quantile(wa, percentile) / cb.quantile(wb, percentile)

    return _two_sample(candidate, reference, ratio, confidence, n_resamples, seed)


def pooled_mean(
    sample: UnitSample, *, confidence: float = 0.9, n_resamples: int = 2000, seed: int = 0
) -> Interval:
    """Pooled mean over all values (a rate when values are per-cycle counts), cluster bootstrap."""
    _check_units(sample)
    sums = sample.unit_sums()
    n = sample.unit_counts()

    def stat(idx, axis=-1):
        w = _weights(np.moveaxis(idx, axis, -1), sample.n_units)
        return (w @ sums) / (w @ n)

    low, high = _bootstrap((sample,), stat, confidence, n_resamples, seed)
    return Interval(float(sums.sum() / n.sum()), low, high, confidence, sample.n_units, _METHOD)


def _pooled_means(candidate: UnitSample, reference: UnitSample):
    """Both populations' pooled means as a function of unit weights (sums and counts per unit)."""
    (sa, na), (sb, nb) = ((s.unit_sums(), s.unit_counts()) for s in (candidate, reference))

    def means(wa, wb):
        return (wa @ sa) / (wa @ na), (wb @ sb) / (wb @ nb)

    return means


def mean_ratio(
    candidate: UnitSample,
    reference: UnitSample,
    *,
    confidence: float = 0.9,
    n_resamples: int = 2000,
    seed: int = 0,
) -> Interval:
    """Ratio of pooled means (candidate / reference), cluster bootstrap."""
    _check_units(candidate, reference)
    means = _pooled_means(candidate, reference)

    def ratio(wa, wb):
        with np.errstate(divide="ignore", invalid="ignore"):
            a, b = means(wa, wb)
            return a / b

    return _two_sample(candidate, reference, ratio, confidence, n_resamples, seed)


def mean_difference(
    candidate: UnitSample,
    reference: UnitSample,
    *,
    confidence: float = 0.9,
    n_resamples: int = 2000,
    seed: int = 0,
) -> Interval:
    """Difference of pooled means (candidate - reference), cluster bootstrap; for rates that may be 0."""
    _check_units(candidate, reference)
    means = _pooled_means(candidate, reference)

    def diff(wa, wb):
        a, b = means(wa, wb)
        return a - b

    return _two_sample(candidate, reference, diff, confidence, n_resamples, seed)


@dataclass(frozen=True)
class UnitTests:
    """Distribution-free tests on one summary value per unit (the sample size is the unit count)."""

    summary: str  # what each unit contributes, e.g. "per-unit p95"
    units: tuple[int, ...]
    mann_whitney_p: float  # two-sided; NaN for more than two populations
    mann_whitney_worse_p: float  # one-sided: first population stochastically greater (worse)
    ks_p: float  # two-sample Kolmogorov-Smirnov, two-sided; NaN for more than two
    anderson_p: float  # Anderson-Darling k-sample (midrank variant)
    anderson_capped: bool  # scipy's table bounds the p-value to [0.001, 0.25]: it lies beyond that
    kruskal_p: float  # Kruskal-Wallis, for any number of populations
    mann_whitney_better_p: float = float("nan")  # one-sided: first population stochastically less

    @property
    def leaning(self) -> str:
        """Which way the per-unit summaries lean: "worse" (candidate higher), "better" or "" (no test)."""
        worse, better = self.mann_whitney_worse_p, self.mann_whitney_better_p
        if math.isnan(worse) or math.isnan(better):
            return ""
        return "worse" if worse <= better else "better"


def unit_tests(per_unit: list[np.ndarray], summary: str) -> UnitTests:
    """Compare populations through their per-unit summaries; the first one is the candidate."""
    if len(per_unit) < 2 or any(len(x) < 2 for x in per_unit):
        raise DataError("comparing populations needs at least two units in each of two populations")
    nan = float("nan")
    if np.ptp(np.concatenate(per_unit)) == 0:  # every unit alike (e.g. no chatter anywhere): no test
        return UnitTests(summary, tuple(len(x) for x in per_unit), nan, nan, nan, nan, False, nan, nan)
    mw = mw_worse = mw_better = ks = nan
    if len(per_unit) == 2:
        a, b = per_unit
        mw = float(stats.mannwhitneyu(a, b, alternative="two-sided").pvalue)
        mw_worse = float(stats.mannwhitneyu(a, b, alternative="greater").pvalue)
        mw_better = float(stats.mannwhitneyu(a, b, alternative="less").pvalue)
        ks = float(stats.ks_2samp(a, b).pvalue)
    capped = False
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            ad = float(stats.anderson_ksamp(per_unit, variant="midrank").pvalue)
        capped = any(("capped" in str(w.message) or "floored" in str(w.message)) for w in caught)
    except ValueError:  # all values identical
        ad = nan
    try:
        kw = float(stats.kruskal(*per_unit).pvalue)
    except ValueError:
        kw = nan
    return UnitTests(summary, tuple(len(x) for x in per_unit), mw, mw_worse, ks, ad, capped, kw, mw_better)


@dataclass(frozen=True)
class Capability:
    """Capability against a one-sided upper limit (pooled actuations; bounds by unit bootstrap).

    `ppk` is (USL - mean) / (3 s); `percentile_index` is (USL - median) / (p99.865 - median), the
    quantile form for non-normal data (Clements, Quality Progress 22(9), 1989; the percentile method of
    ISO 22514-2; both from memory). NaN when there are too few values to place p99.865.
    """

    limit: float
    ppk: Interval
    percentile_index: Interval


def capability(
    sample: UnitSample,
    upper_limit: float,
    *,
    confidence: float = 0.9,
    n_resamples: int = 2000,
    seed: int = 0,
    method: str = "auto",
) -> Capability:
    """Ppk and the percentile index of the pooled actuations, with one-sided bounds at `confidence`.

    `method` as for `pooled_percentile`: the bounds come from the random-unit-effect model's generalized
    pivotal draws (each draw's population mean and sd, `UnitEffect.moments`, and its median and
    p99.865, `UnitEffect.quantile`) where every unit's median is positive, else from the cluster
    bootstrap, which falls far short with 8 to 32 units (tests/benchmarks/bench_calibration.py --only
    info; docs/qualification.md)."""
    _check_units(sample)
    u = sample.n_units
    s1 = sample.unit_sums()
    s2 = sample.unit_sums(power=2)
    n = sample.unit_counts()

    def ppk(w):
        m = (w @ s1) / (w @ n)
        var = ((w @ s2) - (w @ n) * m**2) / np.maximum((w @ n) - 1, 1)
        with np.errstate(divide="ignore", invalid="ignore"):
            return (upper_limit - m) / (3.0 * np.sqrt(np.maximum(var, 0.0)))

    cdf = sample.pooled_cdf()

    def pindex(w):
        med = cdf.quantile(w, 50.0)
        tail = cdf.quantile(w, PERCENTILE_INDEX_TAIL)
        with np.errstate(divide="ignore", invalid="ignore"):
            return (upper_limit - med) / (tail - med)

    ones = np.ones(u)
    model = sample.unit_effect() if method in ("auto", "unit-effect") else None
    too_few = len(sample) * (1 - PERCENTILE_INDEX_TAIL / 100) < 1
    if model is not None:
        mu, sigma = model.draws(n_resamples, np.random.default_rng(seed))
        mean, sd = model.moments(mu, sigma)
        with np.errstate(divide="ignore", invalid="ignore"):
            lo, hi = effect_bounds((upper_limit - mean) / (3.0 * sd), confidence)
            ppk_i = Interval(float(ppk(ones)), lo, hi, confidence, u, EFFECT_METHOD)
            if too_few:
                nan = float("nan")
                pidx = Interval(nan, nan, nan, confidence, u, "too few values to place p99.865")
            else:
                med = model.quantile(mu, sigma, 50.0)
                tail = model.quantile(mu, sigma, PERCENTILE_INDEX_TAIL)
                lo, hi = effect_bounds((upper_limit - med) / (tail - med), confidence)
                pidx = Interval(float(pindex(ones)), lo, hi, confidence, u, EFFECT_METHOD)
        return Capability(upper_limit, ppk_i, pidx)
    method = _METHOD
    lo, hi = _bootstrap(
        (sample,),
        lambda i, axis=-1: ppk(_weights(np.moveaxis(i, axis, -1), u)),
        confidence,
        n_resamples,
        seed,
    )
    ppk_i = Interval(float(ppk(ones)), lo, hi, confidence, u, method)
    if too_few:
        nan = float("nan")
        pidx = Interval(nan, nan, nan, confidence, u, "too few values to place p99.865")
    else:
        lo, hi = _bootstrap(
            (sample,),
            lambda i, axis=-1: pindex(_weights(np.moveaxis(i, axis, -1), u)),
            confidence,
            n_resamples,
            seed,
        )
        pidx = Interval(float(pindex(ones)), lo, hi, confidence, u, method)
    return Capability(upper_limit, ppk_i, pidx)


@dataclass(frozen=True)
class Share:
    """Share of actuations beyond a limit.

    `cp_low`/`cp_high`: Clopper-Pearson bounds, each one-sided at `confidence`, treating the actuations as
    independent trials (true of *these* units' recorded actuations, too narrow for the population).
    `unit_low`/`unit_high`: one-sided cluster-bootstrap bounds at `confidence`, for the population.
    """

    beyond: int
    total: int
    share: float
    cp_low: float
    cp_high: float
    unit_low: float
    unit_high: float
    confidence: float


def share_beyond(
    sample: UnitSample,
    limit: float,
    *,
    confidence: float = 0.9,
    n_resamples: int = 2000,
    seed: int = 0,
    method: str = "auto",
) -> Share:
    """The share of actuations beyond `limit`: Clopper-Pearson for these actuations, and bounds for the
    population from the random-unit-effect model (each pivotal draw's 1 - F(limit),
    `UnitEffect.share_above`) where every unit's median is positive, else from the cluster bootstrap
    of the share (which gives [0, 0] whenever no recorded value passed the limit)."""
    if len(sample) == 0:
        raise DataError("no measured values")
    over = sample.values > limit
    k, n = int(round(sample.unit_sums(over.astype(np.float64)).sum())), len(sample)
    ci = exact_binomial_bounds(k, n, confidence)
    model = sample.unit_effect() if method in ("auto", "unit-effect") and sample.n_units >= 3 else None
    if model is not None:
        mu, sigma = model.draws(n_resamples, np.random.default_rng(seed))
        ulo, uhi = effect_bounds(model.share_above(mu, sigma, limit), confidence)
    elif sample.n_units >= 3:
        iv = pooled_mean(
            UnitSample(over.astype(np.float64), sample.unit, sample.unit_names, sample.weights),
            confidence=confidence,
            n_resamples=n_resamples,
            seed=seed,
        )
        ulo, uhi = iv.low, iv.high
    else:
        ulo = uhi = math.nan
    return Share(k, n, k / n, float(ci.low), float(ci.high), ulo, uhi, confidence)
