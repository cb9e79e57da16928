"""Tail fits against scipy's distributions and the exact binomial bound."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from benchlog.design import fit_tail, gpd_pwm, zero_event_bound


def test_pwm_recovers_a_generalized_pareto():
    # samples from scipy.stats.genpareto (reference library); PWM estimator of Hosking and Wallis (1987)
    for c in (-0.2, 0.0, 0.2):
        y = np.sort(stats.genpareto.rvs(c, scale=2.0, size=20000, random_state=np.random.default_rng(1)))
        xi, scale = gpd_pwm(y)
        assert xi == pytest.approx(c, abs=0.04)
        assert scale == pytest.approx(2.0, rel=0.05)


def test_pwm_agrees_with_scipy_maximum_likelihood():
    y = np.sort(stats.genpareto.rvs(0.1, scale=1.0, size=5000, random_state=np.random.default_rng(3)))
    xi, scale = gpd_pwm(y)
    c_mle, _, s_mle = stats.genpareto.fit(y, floc=0)
    assert xi == pytest.approx(c_mle, abs=0.05)
    assert scale == pytest.approx(s_mle, rel=0.05)


def test_zero_event_bound_is_the_clopper_pearson_bound():
    # exact binomial upper bound with no events = beta(1, n) quantile (scipy.stats.beta)
    for n in (10, 300, 10000):
        assert zero_event_bound(n) == pytest.approx(stats.beta.ppf(0.95, 1, n), rel=1e-9)
    # the "rule of three": about 3 / n for large n (Hanley and Lippman-Hand, JAMA 1983)
    assert zero_event_bound(10000) == pytest.approx(3 / 10000, rel=0.01)


def test_extrapolated_tail_of_a_lognormal_population():
    # bounce times from a known lognormal: the fitted tail's 1e-4 quantile within 25 % of the true one
    rng = np.random.default_rng(7)
    mu, sigma = np.log(1e6), 0.35
    x = np.exp(mu + sigma * rng.standard_normal(20000))
    tail = fit_tail(x)
    assert tail.model == "generalized Pareto"
    true_q = float(stats.lognorm.isf(1e-4, sigma, scale=np.exp(mu)))
    assert tail.isf(1e-4) == pytest.approx(true_q, rel=0.25)
    assert float(tail.sf(true_q)) == pytest.approx(1e-4, rel=1.0)
    assert tail.sf_upper(true_q) >= float(tail.sf(true_q))


def test_small_samples_fall_back_to_lognormal_then_none():
    rng = np.random.default_rng(8)
    x = np.exp(rng.standard_normal(50))
    t = fit_tail(x)
    assert t.model == "lognormal"
    mu, s = np.log(x).mean(), np.log(x).std(ddof=1)
    assert float(t.sf(3.0)) == pytest.approx(stats.lognorm.sf(3.0, s, scale=np.exp(mu)), rel=1e-9)
    none = fit_tail(x[:5])
    assert none.model == "none"
    assert none.sf_upper(100.0) == pytest.approx(zero_event_bound(5))


def test_bootstrap_fits_without_sorting_match_the_sorted_resamples():
    # each resample's PWM fit from draw counts equals gpd_pwm on the same resample sorted: b1 is
    # defined on the order statistics (Hosking and Wallis, Technometrics 29(3), 1987)
    from benchlog.design._tail import _boot_pwm

    rng = np.random.default_rng(4)
    for n in (20, 333, 5000):
        y = np.sort(rng.pareto(3.0, n))
        idx = rng.integers(0, n, (40, n))
        xi, sc = _boot_pwm(y, idx)
        want_xi, want_sc = gpd_pwm(y[np.sort(idx, axis=1)])
        np.testing.assert_allclose(xi, want_xi, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(sc, want_sc, rtol=1e-9)
