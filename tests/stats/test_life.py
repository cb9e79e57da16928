import math

import numpy as np
import pytest
from scipy import optimize, stats

from benchlog.errors import DataError
from benchlog.stats import (
    LifeTable,
    failure_rate,
    fit_by_mode,
    fit_weibull,
    plot_positions,
    same_life_test,
    weibayes_bx_lower,
)

# Nelson's diesel-generator fan data (Nelson, *Applied Life Data Analysis*, Wiley 1982): 70 fans, hours,
# 0 = failed, 1 = still running (suspension). The same data and their two-parameter Weibull ML
# estimates are held in scipy's own test suite (scipy/stats/tests/test_continuous_fit_censored.py).
FANS = """
450 0 460 1 1150 0 1150 0 1560 1 1600 0 1660 1 1850 1 1850 1 1850 1 1850 1 1850 1 2030 1 2030 1
2030 1 2070 0 2070 0 2080 0 2200 1 3000 1 3000 1 3000 1 3000 1 3100 0 3200 1 3450 0 3750 1 3750 1
4150 1 4150 1 4150 1 4150 1 4300 1 4300 1 4300 1 4300 1 4600 0 4850 1 4850 1 4850 1 4850 1 5000 1
5000 1 5000 1 6100 1 6100 0 6100 1 6100 1 6300 1 6450 1 6450 1 6700 1 7450 1 7800 1 7800 1 8100 1
8100 1 8200 1 8500 1 8500 1 8500 1 8750 1 8750 0 8750 1 9400 1 9900 1 10100 1 10100 1 10100 1
11500 1
"""


def fans() -> LifeTable:
    pairs = np.array(FANS.split(), dtype=int).reshape(-1, 2)
    return LifeTable.of([(i, h / 1000.0, c == 0, "fan") for i, (h, c) in enumerate(pairs)])


def hand_loglik(beta, eta, t, failed):
    """The censored Weibull log-likelihood written out, independent of scipy's distribution code."""
    z = (t / eta) ** beta
    return np.sum(failed * (np.log(beta / eta) + (beta - 1) * np.log(t / eta))) - np.sum(z)


def test_nelson_fans_to_four_significant_figures():
    table = fans()
    assert len(table) == 70 and table.failures == 12  # 58 suspensions kept, none counted as failures
    fit = fit_weibull(table)
    # the ML estimates scipy's test suite holds for these data: shape 1.0584, scale 26.297 (thousand hours)
    assert fit.shape == pytest.approx(1.0584, rel=1e-4)
    assert fit.scale == pytest.approx(26.2968, rel=1e-5)
    assert float(f"{fit.shape:.4g}") == 1.058 and float(f"{fit.scale:.4g}") == 26.30


def test_mle_agrees_with_direct_maximisation():
    # independent check: maximise the hand-written log-likelihood with scipy.optimize (Nelder-Mead)
    table = fans()
    t, f = table.cycles, table.failed.astype(float)
    res = optimize.minimize(
        lambda p: -hand_loglik(math.exp(p[0]), math.exp(p[1]), t, f),
        x0=[0.0, math.log(20.0)],
        method="Nelder-Mead",
        options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 5000},
    )
    fit = fit_weibull(table)
    assert fit.shape == pytest.approx(math.exp(res.x[0]), rel=1e-5)
    assert fit.scale == pytest.approx(math.exp(res.x[1]), rel=1e-5)
    assert fit.loglik == pytest.approx(hand_loglik(fit.shape, fit.scale, t, f), rel=1e-9)


def test_a_small_censored_sample_held_in_scipys_tests():
    # 20 survival times, * = right-censored: shape 2.149, scale 28.99 (the data and estimates of scipy's
    # test suite, scipy/stats/tests/test_continuous_fit_censored.py)
    s = "3,5,6*,8,10*,11*,15,20*,22,23,27*,29,32,35,40,26,28,33*,21,24*"
    table = LifeTable.of(
        [(i, float(w.rstrip("*")), not w.endswith("*"), "x") for i, w in enumerate(s.split(","))]
    )
    fit = fit_weibull(table)
    assert fit.shape == pytest.approx(2.149, rel=1e-3)
    assert fit.scale == pytest.approx(28.99, rel=1e-3)


def test_b10_closed_form_and_scipy_quantile():
    fit = fit_weibull(fans())
    # closed form eta * (-ln 0.9)^(1/beta) (common practice, no source) and scipy's ppf as reference
    assert fit.bx(10) == pytest.approx(fit.scale * (-math.log(0.9)) ** (1 / fit.shape), rel=1e-12)
    assert fit.bx(10) == pytest.approx(stats.weibull_min.ppf(0.10, fit.shape, scale=fit.scale), rel=1e-10)
    assert fit.reliability(fit.bx(10)) == pytest.approx(0.9, rel=1e-12)


def test_likelihood_ratio_bounds_meet_their_definition():
    table = fans()
    fit = fit_weibull(table)
    lo, hi = fit.bx_bounds(10, 0.9)
    assert lo < fit.bx(10) < hi
    crit = stats.chi2.ppf(0.8, 1)  # one-sided 90 % each side = two-sided 80 %
    t, f = table.cycles, table.failed.astype(float)
    k = -math.log(0.9)
    for tx in (lo, hi):  # profile by an independent optimiser over the shape, B10 held at tx
        res = optimize.minimize_scalar(
            lambda b, tx=tx: -hand_loglik(b, tx / k ** (1 / b), t, f),
            bounds=(0.2, 5.0),
            method="bounded",
            options={"xatol": 1e-10},
        )
        assert 2 * (fit.loglik + res.fun) == pytest.approx(crit, abs=1e-4)
    slo, shi = fit.shape_bounds(0.9)
    assert slo < fit.shape < shi
    elo, ehi = fit.scale_bounds(0.9)
    assert elo < fit.scale < ehi
    # wider at higher confidence
    lo95, hi95 = fit.bx_bounds(10, 0.95)
    assert lo95 < lo and hi95 > hi


def test_suspensions_are_not_dropped():
    table = fans()
    only_failures = LifeTable(
        table.unit[table.failed],
        table.cycles[table.failed],
        table.failed[table.failed],
        table.mode[table.failed],
    )
    # dropping the 58 running fans would make the life look about ten times shorter
    assert fit_weibull(only_failures).scale < fit_weibull(table).scale / 5


def test_too_few_failures_is_a_data_error():
    table = LifeTable.of([(1, 100.0, True, "welded"), (2, 200.0, False, ""), (3, 300.0, False, "")])
    with pytest.raises(DataError):
        fit_weibull(table)


def test_plot_positions_benard_without_suspensions():
    table = LifeTable.of([(i, float(t), True, "m") for i, t in enumerate([5, 1, 4, 2, 3])])
    t, F = plot_positions(table)
    n = 5
    # Benard's approximation (i - 0.3) / (n + 0.4) of the median rank (Benard, 1953; from memory)
    assert np.allclose(t, [1, 2, 3, 4, 5])
    assert np.allclose(F, (np.arange(1, n + 1) - 0.3) / (n + 0.4))


def test_plot_positions_johnson_adjusted_ranks():
    # failure, suspension, failure, failure, failure; by hand with Johnson's increment
    # (N + 1 - previous) / (1 + units beyond the suspended set): 1, 1 + 5/4, 2.25 + 3.75/3, 3.5 + 2.5/2
    table = LifeTable.of(
        [
            (1, 10.0, True, "m"),
            (2, 20.0, False, ""),
            (3, 30.0, True, "m"),
            (4, 40.0, True, "m"),
            (5, 50.0, True, "m"),
        ]
    )
    t, F = plot_positions(table)
    ranks = np.array([1.0, 2.25, 3.5, 4.75])
    assert np.allclose(t, [10, 30, 40, 50])
    assert np.allclose(F, (ranks - 0.3) / 5.4)


def test_competing_risks_fit_each_mode_with_others_suspended():
    rng = np.random.default_rng(5)
    n = 60
    weld = 300_000 * rng.weibull(3.0, n)
    wear = 250_000 * rng.weibull(1.5, n)
    end = 400_000.0
    t = np.minimum.reduce([weld, wear, np.full(n, end)])
    mode = np.where(t == end, "", np.where(weld < wear, "welded", "missed make"))
    table = LifeTable(np.arange(n).astype(object), t, mode != "", mode.astype(object))
    fits = fit_by_mode(table)
    assert set(fits) == {"welded", "missed make"}
    for m, fit in fits.items():
        direct = fit_weibull(table.only_mode(m))
        assert fit.shape == pytest.approx(direct.shape) and fit.units == n
        assert fit.failures == int(np.sum(mode == m))
    # each mode's shape is recovered roughly (welding wear-out, steep; missed make shallower)
    assert fits["welded"].shape > fits["missed make"].shape


def test_weibayes_zero_failure_bound():
    # n units all surviving t: eta_low = t * (n / -ln(1 - C))^(1/beta) (Abernethy, New Weibull
    # Handbook, ch. 6, from memory); the chi-square form with 2 dof must agree
    table = LifeTable.of([(i, 50_000.0, False, "") for i in range(10)])
    b = weibayes_bx_lower(table, 2.0, 10, 0.9)
    eta = 50_000 * (10 / -math.log(0.1)) ** 0.5
    assert b == pytest.approx(eta * (-math.log(0.9)) ** 0.5, rel=1e-9)


def test_failure_rate_clopper_pearson():
    r = failure_rate(3, 1_000_000, confidence=0.95)
    # Clopper and Pearson (Biometrika 26, 1934): the limits are beta quantiles (scipy.stats.beta),
    # each one-sided at the confidence, as qualify's other bounds are
    assert r.low == pytest.approx(stats.beta.ppf(0.05, 3, 1_000_000 - 3 + 1) * 1e4, rel=1e-6)
    assert r.high == pytest.approx(stats.beta.ppf(0.95, 4, 1_000_000 - 3) * 1e4, rel=1e-6)
    assert r.rate == pytest.approx(0.03)
    assert r.operation == "coil cycle"
    zero = failure_rate(0, 1000, confidence=0.9)
    # no failures: the one-sided upper limit solves (1 - p)^n = 1 - confidence (Clopper and Pearson)
    assert zero.low == 0 and zero.high == pytest.approx((1 - 0.1 ** (1 / 1000)) * 1e4, rel=1e-9)
    with pytest.raises(DataError):
        failure_rate(1, 0)
    with pytest.raises(DataError):
        failure_rate(1, 1000, confidence=0.4)


def test_a_life_tests_failure_rate_counts_units_as_the_trials():
    # 3 of 8 units failed over 2,000,000 unit-cycles: the Clopper-Pearson interval on 3 of 8 (scipy's
    # beta quantiles, as above) times 8 / 2,000,000 operations a unit
    r = failure_rate(3, 2_000_000, confidence=0.9, units=8, per=1)
    assert r.low == pytest.approx(stats.beta.ppf(0.1, 3, 6) * 8 / 2e6, rel=1e-6)
    assert r.high == pytest.approx(stats.beta.ppf(0.9, 4, 5) * 8 / 2e6, rel=1e-6)
    assert r.rate == pytest.approx(1.5e-6)
    with pytest.raises(DataError):
        failure_rate(9, 2_000_000, units=8)


def test_a_life_tests_failure_rate_interval_holds_its_level():
    # 400 life tests of 16 units, Weibull lives (shape 2.4, scale 420,000 cycles: the demo's AG-MS5)
    # stopped at 300,000 cycles; the truth is the failures per cycle such a test expects,
    # F(T) / E[min(L, T)], E[min(L, T)] the integral of the survival function (scipy's quad). Each
    # one-sided 90 % bound should hold within 2.5 points of 90 % (binomial SD here 1.5 points); taken
    # two-sided at 90 %, as it was, each side held about 95-96 %, and counting each cycle as a trial
    # the pair held about 96 %.
    from scipy import integrate

    shape, scale, end = 2.4, 420_000.0, 300_000.0

    def surv(t):
        return math.exp(-((t / scale) ** shape))

    truth = (1 - surv(end)) / integrate.quad(surv, 0, end)[0]
    rng = np.random.default_rng(12)
    low = high = 0
    for _ in range(400):
        life = scale * rng.weibull(shape, 16)
        ops = int(round(np.minimum(life, end).sum()))
        r = failure_rate(int((life <= end).sum()), ops, confidence=0.9, per=1, units=16)
        low += r.low <= truth
        high += truth <= r.high
    assert 0.875 <= low / 400 <= 0.925 and 0.875 <= high / 400 <= 0.925, (low, high)


def test_scipy_documented_binomial_interval():
    # scipy.stats.binomtest docs example: 3 unsafe of 15, one-sided 95 % lower limit 0.05684686759024681
    res = stats.binomtest(3, n=15, p=0.1, alternative="greater")
    assert res.proportion_ci(confidence_level=0.95, method="exact").low == pytest.approx(0.05684686759024681)


def test_same_life_test():
    rng = np.random.default_rng(2)

    def table(scale, seed):
        r = np.random.default_rng(seed)
        t = scale * r.weibull(2.0, 40)
        end = 1.2 * scale
        return LifeTable(
            np.arange(40).astype(object),
            np.minimum(t, end),
            t < end,
            np.where(t < end, "w", "").astype(object),
        )

    del rng
    _, p_same, dof = same_life_test([fit_weibull(table(1e5, 1)), fit_weibull(table(1e5, 2))])
    _, p_diff, _ = same_life_test([fit_weibull(table(1e5, 3)), fit_weibull(table(3e5, 4))])
    assert dof == 2 and p_same > 0.05 and p_diff < 1e-4


def test_matching_prior_bound_leaves_its_share_of_posterior_below():
    # The lower bound on B10 is the 10 % point of the posterior of ln B10 under the prior 1/b, which
    # the code integrates on a grid. scipy's dblquad over (ln shape, ln B10) of the same posterior
    # (likelihood written out here, prior flat in ln shape) must find 10 % of the mass below it.
    from scipy import integrate

    rng = np.random.default_rng(1)
    life = 420_000 * rng.weibull(2.4, 16)
    table = LifeTable.of([(i, min(v, 3e5), bool(v <= 3e5), "x") for i, v in enumerate(life)])
    fit = fit_weibull(table)
    k = -math.log(0.9)
    low = fit.bx_lower_matching(10, 0.9)
    assert low < fit.bx(10)
    # the posterior is that of the test read as stopped at its last failure: the units alive at
    # 300,000 cycles count as suspended at the last failure's cycles
    last = fit.t_fail.max()
    log_t = np.log(np.minimum(table.cycles, last))
    r, s_f = fit.failures, np.log(fit.t_fail).sum()

    def density(x, lb):  # in (ln B10, ln shape)
        b = math.exp(lb)
        ll = r * lb - r * (b * x - math.log(k)) + (b - 1) * s_f - k * np.exp(b * (log_t - x)).sum()
        return math.exp(ll - fit.failure_censored().loglik)

    lb0, x0 = math.log(fit.shape), math.log(fit.bx(10))
    below = integrate.dblquad(density, lb0 - 3, lb0 + 3, x0 - 8, math.log(low), epsrel=1e-7)[0]
    above = integrate.dblquad(density, lb0 - 3, lb0 + 3, math.log(low), x0 + 4, epsrel=1e-7)[0]
    assert below / (below + above) == pytest.approx(0.10, abs=5e-4)
    assert fit.bx_lower_matching(10, 0.95) < low  # lower at a higher confidence


def test_the_failure_censored_reading_moves_only_the_units_that_outlived_the_last_failure():
    # units 0-3 failed, unit 4 was taken off early (suspended before the last failure), units 5-7 ran to
    # the end of the test; read as stopped at the last failure (800), only 5-7 move, to 800
    rows = [(0, 300.0, True), (1, 450.0, True), (2, 600.0, True), (3, 800.0, True), (4, 500.0, False)]
    rows += [(5, 2000.0, False), (6, 2000.0, False), (7, 2000.0, False)]
    fit = fit_weibull(LifeTable.of([(u, c, f, "x" if f else "") for u, c, f in rows]))
    cen = fit.failure_censored()
    assert sorted(cen.t_susp.tolist()) == [500.0, 800.0, 800.0, 800.0]
    by_hand = fit_weibull(LifeTable.of([(u, min(c, 800.0), f, "x" if f else "") for u, c, f in rows]))
    assert (cen.shape, cen.scale) == pytest.approx((by_hand.shape, by_hand.scale), rel=1e-9)
    assert (fit.shape, fit.scale) != pytest.approx((cen.shape, cen.scale))  # the fit itself is unchanged
    assert cen.failure_censored() is cen  # nothing ran past its last failure
