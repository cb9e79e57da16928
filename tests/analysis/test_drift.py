"""Drift charts against a published worked example, and the window statistic and projection."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy.stats import theilslopes

from benchlog.analysis import (
    MAKE,
    CoarseSeries,
    DriftMonitor,
    coarse_windows,
    cusum,
    drift,
    drift_horizon,
    empty_actuations,
    ewma,
    project,
    window_stats,
)

# Montgomery, Introduction to Statistical Quality Control, tabular CUSUM example (Table 9.1 in the
# editions I know): 30 observations, the first 20 from N(10, 1), the last 10 after a shift to mean 11.
MONTGOMERY = np.array(
    [9.45, 7.99, 9.29, 11.66, 12.16, 10.18, 8.04, 11.46, 9.20, 10.34,
     9.03, 11.47, 10.51, 9.40, 10.08, 9.37, 10.62, 10.31, 8.52, 10.84,
     10.90, 9.33, 12.29, 11.50, 10.60, 11.08, 10.38, 11.62, 11.31, 10.52]
)  # fmt: skip


def test_cusum_matches_montgomerys_worked_example():
    # mu0 = 10, sigma = 1, k = 1/2, h = 5 (Montgomery's example). From memory of the book's table:
    # C+ first exceeds H = 5 at sample 29, with C+_29 = 5.28 and N+ = 7 (shift after sample 22).
    cp, cm, h = cusum(MONTGOMERY, 10.0, 1.0, k=0.5, h=5.0)
    assert h == 5.0
    assert int(np.argmax(cp > h)) + 1 == 29
    assert cp[28] == pytest.approx(5.28, abs=0.005)
    assert cp[3] == pytest.approx(1.16, abs=0.005) and cp[4] == pytest.approx(2.82, abs=0.005)
    last_zero = max(i for i in range(29) if cp[i] == 0.0) + 1  # sample number of the last reset
    assert 29 - last_zero == 7
    assert not (cm > h).any()


def test_ewma_on_the_same_example():
    # Montgomery's EWMA example on these data: lambda = 0.1, L = 2.7. Steady-state limits
    # 10 +/- 2.7 sqrt(0.1 / 1.9) = 9.38 / 10.62 (the book prints these, from memory); the chart
    # first signals at sample 29 (z_29 = 10.65 > 10.62; computed, consistent with the book from memory).
    z, lo, hi = ewma(MONTGOMERY, 10.0, 1.0, lam=0.1, width=2.7)
    assert z[0] == pytest.approx(9.945) and z[1] == pytest.approx(9.7495)
    assert hi[-1] == pytest.approx(10.62, abs=0.005) and lo[-1] == pytest.approx(9.38, abs=0.005)
    assert hi[0] == pytest.approx(10.27, abs=0.005)  # first limit: 2.7 * sqrt(0.1/1.9 * (1 - 0.9**2))
    assert int(np.argmax(z > hi)) + 1 == 29


def test_ewma_recursion_against_a_plain_loop():
    x = np.random.default_rng(1).normal(size=50)
    z, _, _ = ewma(x, 0.3, 1.0, lam=0.25)
    prev, ref = 0.3, []
    for v in x:
        prev = 0.25 * v + 0.75 * prev  # NIST/SEMATECH e-Handbook 6.3.2.4: EWMA_t = l Y_t + (1 - l) EWMA_t-1
        ref.append(prev)
    np.testing.assert_allclose(z, ref)


def actuations(n_cycles, bounce):
    r = empty_actuations(n_cycles)
    r["kind"] = MAKE
    r["cycle"] = np.arange(n_cycles)
    r["bounce_us"] = bounce
    return r


def test_window_stats_equal_numpy_percentiles_per_window():
    rng = np.random.default_rng(7)
    vals = rng.lognormal(6, 0.4, 5300)
    ws = window_stats(actuations(5300, vals), window_cycles=1000, percentile=95)
    assert len(ws) == 6 and ws["count"].tolist() == [1000] * 5 + [300]
    for i, w in enumerate(ws):
        # numpy's default (linear) percentile is the reference
        assert w["value"] == pytest.approx(np.percentile(vals[i * 1000 : (i + 1) * 1000], 95))


def test_drift_signals_before_the_limit_and_projects_the_crossing():
    rng = np.random.default_rng(3)
    n = 40_000
    cyc = np.arange(n)
    # bounce median 1 ms for 10k cycles, then growing 0.05 ms per 1000 cycles
    growth = np.where(cyc < 10_000, 0.0, (cyc - 10_000) * 0.05e-3 * 1000 / 1000)
    vals = (1000.0 + growth * 1000) * rng.lognormal(0, 0.1, n)
    ws = window_stats(actuations(n, vals), 1000)
    rep = drift(ws, limit=3000.0, baseline_windows=8)
    assert rep.signalled and rep.first_signal_cycle < 20_000
    assert ws["value"].max() < 3000.0  # signalled while still inside the spec
    p = rep.projection
    # reference: scipy's Theil-Sen on the same windows gives the same slope
    after = np.arange(len(ws)) >= 8
    mid = (ws["cycle_start"] + ws["cycle_end"]) / 2
    ref = theilslopes(ws["value"][after], mid[after], alpha=0.9)
    assert p.slope_per_cycle == pytest.approx(ref[0])
    assert p.crossing_low <= p.crossing_cycle <= p.crossing_high
    assert 40_000 < p.crossing_cycle < 70_000  # p95 ~ 1.18 x median: crossing near 47k cycles
    assert rep.flags and "trend" in rep.flags[-1]


def test_flat_data_does_not_signal_and_projects_nothing():
    rng = np.random.default_rng(4)
    vals = rng.lognormal(7, 0.1, 30_000)
    rep = drift(window_stats(actuations(30_000, vals), 1000), limit=3000.0, baseline_windows=8)
    assert project([1, 2, 3, 4], [5, 5, 5, 5], 10).crossing_cycle is None
    assert rep.projection.crossing_cycle is None or rep.projection.crossing_cycle > 10**6
    assert rep.cusum_signal.sum() <= 1


def test_monitor_fed_in_pieces_agrees_with_the_batch_report():
    ws = window_stats(actuations(30, MONTGOMERY * 100), window_cycles=1)
    mon = DriftMonitor(baseline_windows=30, lam=0.1, width=2.7)
    signals = []
    for i in range(0, 30, 7):
        signals += mon.update(ws[i : i + 7])
    rep = mon.report()
    assert [c for c, kind in signals if kind == "ewma"] == list(ws["cycle_end"][rep.ewma_signal])


def test_confirmed_needs_a_rising_trend_as_well_as_a_chart_signal():
    # steady units: how often do the charts alone, and the confirmed flag, fire over 60 windows?
    rng = np.random.default_rng(11)
    charts = confirmed = 0
    for _ in range(60):
        ws = window_stats(actuations(6_000, rng.lognormal(7, 0.3, 6_000)), 100)
        rep = drift(ws, limit=3000.0, baseline_windows=5)
        charts += rep.signalled
        confirmed += rep.confirmed
    assert confirmed <= max(3, charts // 3)  # the trend's slope interval keeps most false alarms out
    # a worn unit: the same noise on a rising bounce is confirmed, and the trend matches scipy's
    n = 6_000
    vals = rng.lognormal(7, 0.3, n) * (1 + np.arange(n) / 3_000)
    ws = window_stats(actuations(n, vals), 100)
    rep = drift(ws, baseline_windows=5)  # no limit: the trend is still fitted
    assert rep.confirmed and rep.projection is None and rep.trend.slope_low > 0
    mid = (ws["cycle_start"] + ws["cycle_end"]) / 2
    assert rep.trend.slope_per_cycle == pytest.approx(theilslopes(ws["value"][5:], mid[5:])[0])


def _rejudged(series_windows, limit, life, every=5):
    """Flag states of one series re-judged as its windows arrive (the dashboard re-reads them)."""
    out = []
    for n in range(8, len(series_windows) + 1, every):
        rep = drift(
            series_windows[:n], limit=limit, baseline_windows=None, horizon=drift_horizon(n * 100, life)
        )
        out.append(rep)
    return out


def test_steady_units_rejudged_over_their_life_are_seldom_flagged():
    # 60 steady units (no trend at all), 6,000 cycles each, re-judged every 5 windows. A false alarm
    # share at most 2 % is the target (issue 14); the charts alone fire on many of them, and the
    # earlier flag (a chart signal with the 90 % slope interval above zero) on more than 2 %.
    rng = np.random.default_rng(11)
    charts = earlier = flagged = 0
    for _ in range(60):
        ws = window_stats(actuations(6_000, rng.lognormal(7, 0.3, 6_000)), 100)
        reps = _rejudged(ws, 3000.0, 100_000)
        charts += any(r.signalled for r in reps)
        earlier += any(r.signalled and r.trend is not None and r.trend.slope_low > 0 for r in reps)
        flagged += any(r.confirmed for r in reps)
    assert charts >= 10 and earlier > 1  # what the flag used to show
    assert flagged <= 1  # <= 2 % of 60


def test_a_unit_past_its_limit_says_since_when_and_projects_nothing():
    n = 8_000
    rng = np.random.default_rng(5)
    vals = 1000.0 * (1 + np.arange(n) / 2_000) * rng.lognormal(0, 0.05, n)  # passes 3,000 near 4,000
    ws = window_stats(actuations(n, vals), 100)
    rep = drift(ws, limit=3000.0, baseline_windows=None, horizon=100_000)
    # since: the first window above the limit from which the median of every 3 windows stays above it
    # (one window's p95 scatters; a single window dipping below does not bring the unit back)
    med3 = np.median(np.lib.stride_tricks.sliding_window_view(ws["value"], 3), axis=1)
    start = int(np.flatnonzero(med3 <= 3000.0)[-1]) + 1
    start += int(np.flatnonzero(ws["value"][start:] > 3000.0)[0])
    assert rep.past_limit and rep.over_since == int(ws["cycle_start"][start])
    last_below = int(np.flatnonzero(ws["value"] <= 3000.0)[-1])
    assert rep.over_since <= int(ws["cycle_start"][last_below + 1])
    assert rep.projection is None and rep.confirmed
    assert f"past its limit since cycle {rep.over_since:,}" in rep.words
    assert "reaches the limit" not in rep.words and "rising trend" in rep.words
    # a unit that failed gets no projection either, and says so
    rep = drift(ws[:30], limit=3000.0, baseline_windows=None, horizon=100_000, failed_at=3_000)
    assert rep.projection is None and "failed at cycle 3,000: no projection" in rep.words


def test_a_failed_unit_is_flagged_only_when_its_trend_was_heading_for_the_limit():
    # common practice, no source: a unit that failed by a weld while its bounce crept far below the
    # limit was not drifting toward that limit; one whose trend reached it within its life was
    n = 6_000
    rng = np.random.default_rng(9)
    for per, flagged in ((100_000, False), (2_000, True)):
        vals = 1000.0 * (1 + np.arange(n) / per) * rng.lognormal(0, 0.05, n)
        ws = window_stats(actuations(n, vals), 100)
        rep = drift(ws, limit=5000.0, baseline_windows=None, horizon=drift_horizon(n, 20_000), failed_at=n)
        assert rep.signalled and rep.rising and rep.projection is None
        assert rep.confirmed is flagged, per


def test_a_unit_crossing_after_its_life_is_flagged_with_over_a_quarter_of_its_cycles_to_go():
    # Issue 14 asks a median lead of at least a fifth of the cycles to the true crossing. A unit that
    # crosses after the spec's life is flagged once its projection comes within the horizon beyond
    # the cycles done, so that horizon sets its lead; a quarter beyond gave 18-21 %, on the target.
    # Truth: the window p95 of 1000 (1 + c / 3000) x lognormal(0, 0.05) is that line times
    # exp(1.645 x 0.05) (the log-normal's 95th percentile, common practice, no source); the limit
    # is where it stands at cycle 6,000.
    n, per, sigma, cross = 8_000, 3_000, 0.05, 6_000
    rng = np.random.default_rng(21)
    vals = 1000.0 * (1 + np.arange(n) / per) * rng.lognormal(0, sigma, n)
    limit = 1000.0 * (1 + cross / per) * math.exp(1.645 * sigma)
    ws = window_stats(actuations(n, vals), 100)
    reps = _rejudged(ws[: cross // 100], limit, life=1_000, every=1)
    first = next(r for r in reps if r.confirmed)
    flagged_at = int(first.windows["cycle_end"][-1])
    assert (cross - flagged_at) / cross >= 0.25, flagged_at
    p = first.projection  # and the range it states holds the true crossing
    assert p.crossing_low <= cross <= p.crossing_high


def test_the_stated_crossing_range_holds_the_true_crossing_of_a_bending_trend():
    # Wear bends the statistic over a little (the simulator's make bounce p95 rises a few per cent
    # slower late in life), so a straight line through the whole life reaches the limit early, and its
    # slope's 90 % interval alone held the true crossing at 0.78 of first flags on the simulator (issue
    # 14's harness). Here the line bends by 2 % of its rise per 3,000 cycles squared; truth as above
    # (log-normal 95th percentile, common practice, no source). A 90 % range should hold it in about
    # 18 of 20 series; the slope's interval alone held 14 (the union below, 19).
    n, sigma, cross = 6_000, 0.05, 6_000

    def line(c):
        return 1 + c / 3_000 - 0.02 * (c / 3_000) ** 2

    limit = 1000.0 * line(cross) * math.exp(1.645 * sigma)
    held = 0
    for seed in range(20):
        rng = np.random.default_rng(100 + seed)
        vals = 1000.0 * line(np.arange(n)) * rng.lognormal(0, sigma, n)
        reps = _rejudged(window_stats(actuations(n, vals), 100), limit, life=1_000, every=1)
        p = next(r for r in reps if r.confirmed).projection
        held += (p.crossing_low or 0) <= cross <= (p.crossing_high or math.inf)
    assert held >= 16, held


def test_a_slow_creep_that_stays_below_the_limit_within_the_life_is_no_flag():
    # rising for certain, but the line reaches the limit far beyond the unit's life: no flag
    n = 10_000
    rng = np.random.default_rng(8)
    vals = 1000.0 * (1 + np.arange(n) / 200_000) * rng.lognormal(0, 0.05, n)
    ws = window_stats(actuations(n, vals), 100)
    rep = drift(ws, limit=3000.0, baseline_windows=None, horizon=drift_horizon(n, 100_000))
    assert rep.rising and rep.projection.crossing_cycle > 100_000
    assert not rep.confirmed


def test_trend_test_is_kendalls_tau_as_scipy_computes_it():
    from scipy.stats import kendalltau

    from benchlog.analysis._drift import rising_trend_p

    rng = np.random.default_rng(0)
    for n in (12, 40, 200):
        y = np.round(rng.normal(size=n) + 0.01 * np.arange(n), 1)  # rounded: ties as well
        # reference: scipy.stats.kendalltau, one-sided, normal approximation with tie correction
        ref = kendalltau(np.arange(n), y, alternative="greater", method="asymptotic").pvalue
        assert rising_trend_p(y) == pytest.approx(ref, rel=1e-9)


def _remedian_reference(lo, hi, cnt, val, points):
    """The remedian by its definition (Rousseeuw and Bassett, JASA 85, 1990: medians of 3, level upon
    level), with numpy's nanmedian, for the windows with data: the groups of 3**L windows at the lowest L
    leaving at most `points` of them, and a last, unfinished group from the medians of its finished
    parts (benchlog's own rule for the tail)."""
    keep = cnt > 0
    lo, hi, cnt, val = lo[keep], hi[keep], cnt[keep], val[keep]
    n = len(val)
    level = 0
    while math.ceil(n / 3**level) > points:
        level += 1

    def value(i, size):  # the remedian of the group of `size` (a power of 3) windows from window i
        if size == 1:
            return val[i]
        parts = [value(i + j * size // 3, size // 3) for j in range(3)]
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            return float(np.nanmedian(parts))

    size = 3**level
    out = [
        (lo[i], hi[i + size - 1] + 1, cnt[i : i + size].sum(), value(i, size))
        for i in range(0, n // size * size, size)
    ]
    i = n // size * size
    if i < n:
        parts = []
        for lv in range(level - 1, -1, -1):  # the finished parts of the tail, the largest first
            while i + 3**lv <= n:
                parts.append(value(i, 3**lv))
                i += 3**lv
        parts = [p for p in parts if not np.isnan(p)]
        start = n // size * size
        out.append((lo[start], hi[-1] + 1, cnt[start:].sum(), float(np.median(parts)) if parts else np.nan))
    return out


def test_a_long_series_is_coarsened_by_the_remedian_window_by_window_as_all_at_once():
    rng = np.random.default_rng(4)
    n = 700
    lo = np.arange(n) * 100
    hi = lo + 99
    cnt = rng.integers(0, 4, n) * 25  # a quarter of the windows without data, left out
    val = rng.lognormal(7, 0.3, n)
    val[rng.random(n) < 0.1] = np.nan  # counted windows without the statistic
    val[cnt == 0] = np.nan
    points = 7  # several levels within a short series
    fed = CoarseSeries(points)
    resumed = None
    for end in range(1, n + 1):
        fed.add(lo[end - 1], hi[end - 1], cnt[end - 1], val[end - 1])
        whole = coarse_windows(lo[:end], hi[:end], cnt[:end], val[:end], points)
        ref = _remedian_reference(lo[:end], hi[:end], cnt[:end], val[:end], points)
        got = fed.windows()
        assert len(whole) <= points + 1 and len(got) == len(whole) == len(ref), end
        for w in (whole, got):
            assert w["cycle_start"].tolist() == [r[0] for r in ref]
            assert w["cycle_end"].tolist() == [r[1] for r in ref]
            assert w["count"].tolist() == [r[2] for r in ref]
            np.testing.assert_array_equal(w["value"], [r[3] for r in ref])
        if end == 300:  # a unit's earlier life read back from the store, then fed on
            resumed = CoarseSeries.of(lo[:end], hi[:end], cnt[:end], val[:end], points)
        elif resumed is not None:
            resumed.add(lo[end - 1], hi[end - 1], cnt[end - 1], val[end - 1])
            again = resumed.windows()
            for field in again.dtype.names:
                np.testing.assert_array_equal(again[field], got[field])
    held = len(fed.lo) + sum(len(p) for p in fed.pending)
    assert held <= points + 2 * fed.level  # what it keeps, whatever the length


def test_a_series_within_the_points_is_not_coarsened():
    lo = np.arange(240) * 100
    val = np.linspace(1.0, 2.0, 240)
    w = coarse_windows(lo, lo + 99, np.full(240, 100), val)
    assert len(w) == 240 and w["value"].tolist() == val.tolist()
