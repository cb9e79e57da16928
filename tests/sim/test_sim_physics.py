"""The simulator's contacts follow the distributions they are configured with.

Reference library: scipy.stats (kstest, lognorm, weibull_min.fit, chisquare, poisson, mannwhitneyu).
The measured quantities come from the sampler's records (encoded, decoded, unwrapped), not from the
generator's internals; the drawn ground truth is what they are compared with where a draw is random.
"""

from __future__ import annotations

import numpy as np
import pytest
from _sim_helpers import actuations, unwrap_stream
from scipy import stats

from benchlog.sim import Bench, parse_config
from benchlog.sim._physics import cycles, draw_unit
from benchlog.wire import Decoder, Go, Plan

POP = """
[sampler]
board_id = "TEST-PHYS"
clock_hz = 1000000
counter_bits = 32
channels = 4

[populations.P]
supplier = "test"
operate = {{ median_us = 5000.0, sigma = 0.15 }}
release = {{ median_us = 3000.0, sigma = 0.20 }}
make = {{ count_mean = 3.0, first_gap_us = 400.0, dwell_us = 200.0, decay = 0.6, jitter = 0.3 }}
break = {{ count_mean = 1.5, first_gap_us = 1200.0, dwell_us = 500.0, decay = 0.5, jitter = 0.4 }}
wear_per_100k = {wear}
life_shape = {shape}
life_scale = {scale}
failure = {{ {failure} }}
chatter_rate_hz = 40.0
chatter_open = {{ median_us = 100.0, sigma = 0.5 }}

[[units]]
channel = 0
population = "P"
serial = "U0"

[[units]]
channel = 1
population = "P"
serial = "U1"
"""


def config(wear=0.0, shape=2.0, scale=1e12, failure="chatter = 1.0"):
    return parse_config(POP.format(wear=wear, shape=shape, scale=scale, failure=failure), "test")


def run_plan(cfg, channels, cycles_, seed, on_us=50_000, off_us=50_000):
    """Every record of a bench that cycles `channels` `cycles_` times."""
    bench = Bench(cfg, seed=seed)
    recs = bench.advance_to(0)
    for ch in channels:
        bench.command(Plan(ch, on_us, off_us, cycles_))
    bench.command(Go())
    t_end = int((cycles_ + 1) * (on_us + off_us) * 1e3)
    while bench.now_ns < t_end:
        recs += bench.advance_to(t_end)
    return bench, recs


@pytest.fixture(scope="module")
def healthy():
    """Two healthy units, 600 cycles each (50 ms on / 50 ms off), measured from the decoded stream."""
    bench, recs = run_plan(config(), (0, 1), 600, seed=11)
    stream = unwrap_stream(Decoder().feed(bench.encode(recs)), 32)
    acts = [a for ch in (0, 1) for a in actuations(stream, ch)]
    return bench, acts


def _make_side(acts):
    return [a for a in acts if a["drive"] == 1]


def _break_side(acts):
    return [a for a in acts if a["drive"] == 0]


def test_operate_and_release_times_follow_their_lognormals(healthy):
    _, acts = healthy
    operate = np.array([a["ticks"][0] - a["t0"] for a in _make_side(acts)], float)  # 1 tick = 1 us
    release = np.array([a["ticks"][0] - a["t0"] for a in _break_side(acts)], float)
    assert len(operate) == 1200 and len(release) == 1200
    # scipy.stats.kstest against lognorm(s=sigma, scale=median); 1 us quantisation is far below the spread
    assert stats.kstest(operate, stats.lognorm(s=0.15, scale=5000.0).cdf).pvalue > 0.01
    assert stats.kstest(release, stats.lognorm(s=0.20, scale=3000.0).cdf).pvalue > 0.01
    # and not against a neighbouring distribution (the test can fail)
    assert stats.kstest(operate, stats.lognorm(s=0.15, scale=5300.0).cdf).pvalue < 1e-6


def test_make_bounce_counts_are_poisson(healthy):
    _, acts = healthy
    counts = np.array([(len(a["levels"]) - 1) // 2 for a in _make_side(acts)])
    assert all(a["levels"][-1] == 1 for a in _make_side(acts))  # every make ends closed
    # chi-square goodness of fit against scipy.stats.poisson(3.0), bins 0..6 and 7+
    observed = np.bincount(np.minimum(counts, 7), minlength=8)
    pmf = stats.poisson(3.0).pmf(np.arange(7))
    expected = np.append(pmf, 1 - pmf.sum()) * len(counts)
    assert stats.chisquare(observed, expected).pvalue > 0.01


def test_first_gap_follows_its_lognormal_and_break_bounces_longer(healthy):
    _, acts = healthy
    make_gap = np.array(
        [a["ticks"][2] - a["ticks"][1] for a in _make_side(acts) if len(a["ticks"]) >= 3], float
    )
    break_gap = np.array(
        [a["ticks"][2] - a["ticks"][1] for a in _break_side(acts) if len(a["ticks"]) >= 3], float
    )
    # the make side's first reopening: lognorm(s=jitter, scale=first_gap_us) (scipy.stats.kstest)
    assert stats.kstest(make_gap, stats.lognorm(s=0.3, scale=400.0).cdf).pvalue > 0.01
    assert stats.kstest(break_gap, stats.lognorm(s=0.4, scale=1200.0).cdf).pvalue > 0.01
    # break and make bounce differ (scipy.stats.mannwhitneyu)
    assert stats.mannwhitneyu(break_gap, make_gap, alternative="greater").pvalue < 1e-6


def test_measured_bounce_equals_the_drawn_truth(healthy):
    bench, acts = healthy
    truth = bench.truth.actuations
    for side, kind in ((_make_side(acts), 0), (_break_side(acts), 1)):
        measured = np.array([a["ticks"][-1] - a["ticks"][0] for a in side], float)
        count = np.array([(len(a["levels"]) - 1) // 2 for a in side])
        rows = np.concatenate([truth[(truth["channel"] == ch) & (truth["kind"] == kind)] for ch in (0, 1)])
        assert len(measured) == len(rows) == 1200
        # sampled at 1 us: each edge's tick is floored, so a duration is off by at most one tick
        assert np.max(np.abs(measured - rows["bounce_us"])) <= 1.0 + 1e-6
        assert np.array_equal(count, rows["bounce_count"])


def test_bounce_grows_with_wear():
    cfg = config(wear=1.0)
    pop = cfg.populations["P"]
    rng = np.random.default_rng(5)
    young = draw_unit(rng, 0, "Y", pop)
    old = draw_unit(rng, 1, "O", pop)
    old.cycles_done = 300_000  # wear factor 1 + 1.0 * 3 = 4
    _, ty = cycles(rng, young, 0, 50_000_000, 50_000_000, 800, 40, 2.0)
    _, to = cycles(rng, old, 0, 50_000_000, 50_000_000, 800, 40, 2.0)
    gy = ty[ty["kind"] == 0]["first_gap_us"]
    go = to[to["kind"] == 0]["first_gap_us"]
    ratio = np.nanmedian(go) / np.nanmedian(gy)
    assert 3.4 < ratio < 4.6
    assert to[to["kind"] == 0]["bounce_count"].mean() > 3 * ty[ty["kind"] == 0]["bounce_count"].mean()


def test_weibull_lives_recover_shape_and_scale():
    cfg = config(shape=1.7, scale=250_000.0, failure="welded = 0.2, missed_make = 0.3, chatter = 0.5")
    pop = cfg.populations["P"]
    rng = np.random.default_rng(2024)
    units = [draw_unit(rng, 0, f"U{i}", pop) for i in range(2000)]
    lives = np.array([u.life for u in units])
    # scipy.stats.weibull_min.fit with the location fixed at 0 (two-parameter Weibull)
    shape, loc, scale = stats.weibull_min.fit(lives, floc=0)
    assert loc == 0
    assert abs(shape - 1.7) / 1.7 < 0.06
    assert abs(scale - 250_000) / 250_000 < 0.05
    modes = [u.mode for u in units]
    frac = {m: modes.count(m) / len(modes) for m in ("welded", "missed_make", "chatter")}
    assert abs(frac["welded"] - 0.2) < 0.03 and abs(frac["chatter"] - 0.5) < 0.04


@pytest.mark.parametrize("mode", ["welded", "missed_make", "chatter"])
def test_failure_modes_show_in_the_edges(mode):
    cfg = config(shape=3.0, scale=60.0, failure=f"{mode} = 1.0")
    bench, recs = run_plan(cfg, (0,), 200, seed=3)
    stream = unwrap_stream(Decoder().feed(bench.encode(recs)), 32)
    acts = actuations(stream, 0)
    life = bench.units[0].life
    first_fail = int(np.ceil(life))
    makes, breaks = _make_side(acts), _break_side(acts)
    assert len(makes) == 200  # the drive records keep coming whatever the contact does
    healthy_makes = [len(a["levels"]) > 0 for a in makes[:first_fail]]
    assert all(healthy_makes)
    if mode == "welded":
        assert len(breaks[first_fail - 1]["levels"]) > 0  # it still opened before the welding make
        assert len(makes[first_fail]["levels"]) > 0  # the make that welds
        assert all(len(a["levels"]) == 0 for a in breaks[first_fail:])  # never opens again
        assert all(len(a["levels"]) == 0 for a in makes[first_fail + 1 :])
        assert stream["level"][(stream["kind"] == 0) & (stream["channel"] == 0)][-1] == 1  # stuck closed
    elif mode == "missed_make":
        assert all(len(a["levels"]) == 0 for a in makes[first_fail:])
        assert all(len(a["levels"]) == 0 for a in breaks[first_fail:])
    else:
        # chatter: brief openings in the closed period (Poisson, 40/s over ~40 ms closed)
        rows = bench.truth.actuations
        rows = rows[(rows["channel"] == 0) & (rows["kind"] == 0)]
        assert rows["chatter"][:first_fail].sum() == 0
        assert rows["chatter"][first_fail:].sum() > 50
        # each opening is two edges in the stream beside the make's own 1 + 2 * bounce_count
        extra = np.array([len(a["levels"]) for a in makes]) - (1 + 2 * rows["bounce_count"])
        assert np.array_equal(extra, 2 * rows["chatter"])
