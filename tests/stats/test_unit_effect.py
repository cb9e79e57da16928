"""The random-unit-effect bounds on a pooled percentile, against exact results outside the project."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from benchlog.stats import UnitSample, pooled_percentile
from benchlog.stats._unit_effect import METHOD, UnitEffect, bounds, median_noise


def test_without_within_unit_spread_the_bound_is_the_normal_tolerance_bound():
    # Every actuation of a unit at its median: the bound on the p95 is exp(ybar + k s), k the one-sided
    # normal tolerance factor. Exact k = nct.ppf(C, n - 1, z_p sqrt(n)) / sqrt(n) (scipy); for n = 10,
    # p = 0.95, C = 0.95 tables print 2.911 (Natrella, NBS Handbook 91, one-sided factors; from memory).
    rng = np.random.default_rng(0)
    n = 10
    med = np.exp(rng.normal(0.0, 0.5, n))
    s = UnitSample.of(np.repeat(med, 50), np.repeat(np.arange(n), 50))
    model = UnitEffect.of(s)
    _, high = bounds(model.percentile_draws(95.0, 40_000, 1), 0.95)
    y = np.log(med)
    k = (math.log(high) - y.mean()) / y.std(ddof=1)
    exact = stats.nct.ppf(0.95, n - 1, stats.norm.ppf(0.95) * math.sqrt(n)) / math.sqrt(n)
    assert exact == pytest.approx(2.911, abs=0.001)
    assert k == pytest.approx(exact, rel=0.01)  # Monte Carlo over 40,000 pivotal draws


def test_mixture_of_lognormals_is_the_lognormal_of_the_summed_variances():
    # log of (unit median x residual) is a sum of independent normals, so the population is log-normal
    # with sigma = hypot(between, within): its p95 is exp(mu + 1.645 hypot(...)) (exact identity)
    within = 0.3
    resid = np.exp(within * stats.norm.ppf((np.arange(20_000) + 0.5) / 20_000))
    s = UnitSample.of(np.concatenate([resid, 2 * resid]), np.repeat([0, 1], 20_000))
    model = UnitEffect.of(s)
    got = model.quantile(np.array([0.1]), np.array([0.4]), 95.0)[0]
    want = math.exp(0.1 + stats.norm.ppf(0.95) * math.hypot(0.4, within))
    assert got == pytest.approx(want, rel=0.005)


def test_the_default_method_and_its_fallback_for_counts():
    rng = np.random.default_rng(3)
    unit = np.repeat(np.arange(8), 200)
    times = UnitSample.of(np.exp(rng.normal(np.repeat(rng.normal(7, 0.3, 8), 200), 0.2)), unit)
    iv = pooled_percentile(times, 95.0)
    assert iv.method == METHOD and iv.low < iv.estimate < iv.high
    counts = UnitSample.of(rng.poisson(0.3, len(unit)).astype(float), unit)  # unit medians are 0
    iv = pooled_percentile(counts, 95.0)
    assert iv.method != METHOD and "bootstrap" in iv.method


def test_the_variance_of_a_sample_median_is_the_order_statistics():
    # The median of m = 101 normal values is its 51st order statistic: its variance, integrated with
    # scipy over the order statistic's density Beta.pdf(Phi(x); 51, 51) phi(x), is 0.01549 for sd 1
    # (the asymptotic pi / (2 m) = 0.01555: Kendall and Stuart, The Advanced Theory of Statistics,
    # vol. 1; from memory). median_noise reads it off 256 quantiles of log-normal residuals (log-sd w).
    m, k, w = 101, 51, 0.5
    density = lambda x: stats.beta.pdf(stats.norm.cdf(x), k, k) * stats.norm.pdf(x)  # noqa: E731
    exact = integrate.quad(lambda x: x * x * density(x), -4, 4)[0]
    assert exact == pytest.approx(math.pi / (2 * m), rel=0.01)
    r = np.exp(w * stats.norm.ppf((np.arange(256) + 0.5) / 256))
    assert median_noise(r, np.array([m]))[0] == pytest.approx(w * w * exact, rel=0.03)


def test_the_medians_sampling_noise_is_not_counted_as_a_unit_effect():
    # 400 units alike (no unit effect), 101 log-normal actuations each (log-sd 0.5): their log medians
    # still spread by the sampling noise of a median, sd 0.5 sqrt(pi / (2 m)) = 0.062 (the asymptotic
    # variance above). The unit-to-unit sigma the model keeps is what remains beyond that noise; crediting
    # the units with all of it (sigma = 0.063, as before) set every percentile and its bounds high.
    m, w, units = 101, 0.5, 400
    rng = np.random.default_rng(11)
    values = np.exp(w * rng.standard_normal((units, m)))
    noise_sd = w * math.sqrt(math.pi / (2 * m))
    spread = np.log(np.median(values, axis=1)).std(ddof=1)
    assert spread == pytest.approx(noise_sd, rel=0.1)  # 400 medians: their sd within ~4 % of its mean
    model = UnitEffect.of(UnitSample.of(values.ravel(), np.repeat(np.arange(units), m)))
    assert model.sigma < 0.5 * noise_sd


def test_the_mixtures_mean_sd_and_share_beyond_are_the_log_normals():
    # With log-normal residuals (log-sd `within`) and log-normal unit medians (log-sd sigma about mu), a
    # value is log-normal with log-sd hypot(sigma, within) about mu (a sum of independent normals);
    # its mean, sd and share beyond a limit are scipy's lognorm.mean, .std and .sf there (exact).
    within = 0.3
    resid = np.exp(within * stats.norm.ppf((np.arange(20_000) + 0.5) / 20_000))
    s = UnitSample.of(np.concatenate([resid, 2 * resid]), np.repeat([0, 1], 20_000))
    model = UnitEffect.of(s)
    mu, sigma = np.array([0.1, -0.2]), np.array([0.4, 0.15])
    mean, sd = model.moments(mu, sigma)
    share = model.share_above(mu, sigma, 2.0)
    for i in range(2):
        ref = stats.lognorm(s=math.hypot(sigma[i], within), scale=math.exp(mu[i]))
        assert mean[i] == pytest.approx(ref.mean(), rel=2e-3)
        assert sd[i] == pytest.approx(ref.std(), rel=5e-3)
        # the residuals as 1,024 quantiles: a share of a few in 1,000 within about 1 %
        assert share[i] == pytest.approx(ref.sf(2.0), rel=0.02)


def test_capability_and_share_bounds_come_from_the_unit_effect_draws():
    # the bounds are quantiles of the pivotal draws of each figure: Ppk = (USL - mean) / (3 sd) and the
    # share beyond the limit, from the same (mu, sigma) draws; the earlier bootstrap stays selectable
    from benchlog.stats import capability, share_beyond

    rng = np.random.default_rng(3)
    n = 12
    med = np.exp(rng.normal(7.0, 0.25, n))
    vals = np.concatenate([m * rng.lognormal(0.0, 0.4, 300) for m in med])
    s = UnitSample.of(vals, np.repeat(np.arange(n), 300))
    model = UnitEffect.of(s)
    mu, sigma = model.draws(2000, np.random.default_rng(5))
    mean, sd = model.moments(mu, sigma)
    cap = capability(s, 3000.0, confidence=0.9, seed=5)
    assert cap.ppk.method == METHOD
    assert (cap.ppk.low, cap.ppk.high) == pytest.approx(bounds((3000.0 - mean) / (3 * sd), 0.9))
    sh = share_beyond(s, 3000.0, confidence=0.9, seed=5)
    assert (sh.unit_low, sh.unit_high) == pytest.approx(bounds(model.share_above(mu, sigma, 3000.0), 0.9))
    assert capability(s, 3000.0, confidence=0.9, seed=5, method="bootstrap").ppk.method != METHOD
