"""Sampler against truth: the digital view of a capture, against a plain reference loop and hand-built
traces where the two views must differ."""

from __future__ import annotations

import numpy as np

from benchlog.analog import Capture, fraction_levels, measure_capture
from benchlog.analog._sampler import DigitalInput, compare, sampled_edges
from benchlog.analysis import AnalysisSettings

from ._traces import piecewise

SETTINGS = AnalysisSettings(settle_ns=2_000_000)


def reference_sampler(
    v: np.ndarray, dt_ns: float, hi: float, lo: float, ts_ns: float
) -> list[tuple[float, int]]:
    """Plain loop: run the comparator over every sample, read its state at each sampler instant."""
    state, out, last = -1, [], None
    per = int(round(ts_ns / dt_ns))
    for k, x in enumerate(v):
        state = 0 if x >= hi else 1 if x <= lo else state
        if k % per == 0 and state != -1:
            if last is not None and state != last:
                out.append((k * dt_ns, state))
            last = state
    return out


def test_sampled_edges_match_a_reference_loop():
    rng = np.random.default_rng(2)
    for _ in range(20):
        # a random walk between the rails, sampled every 10 ns; the sampler reads every 1 us
        v = np.clip(2.5 + np.cumsum(rng.normal(0, 0.08, 20_000)), 0, 5)
        cap = Capture("r", ("v",), (v,), 0.0, 1e-8)
        e = sampled_edges(cap, v, 5.0, DigitalInput(3.0, 2.0, 5.0, 1_000.0))
        ref = reference_sampler(v, 10.0, 3.0, 2.0, 1_000.0)
        assert [(round(t * 1e9), int(lv)) for t, lv in zip(e.t_s, e.level, strict=True)] == [
            (round(t), s) for t, s in ref
        ]


def make_with(points_after_make: list[tuple[float, float]]) -> Capture:
    pts = [(0.0, 5.0), (1_000_000.0, 5.0), (1_000_100.0, 0.0)] + points_after_make + [(6_000_000.0, 0.0)]
    return piecewise(pts, 10.0, 6_000_000.0)


def test_sampler_undercounts_a_reopening_between_its_samples():
    # a 12 us full reopening (a bounce by the 90 % / 10 us rule) between two samples 20 us apart
    cap = make_with([(1_204_000.0, 0.0), (1_204_100.0, 5.0), (1_216_000.0, 5.0), (1_216_100.0, 0.0)])
    truth = measure_capture(cap, 0, fraction_levels(5.0), SETTINGS)
    c = compare(cap, cap.volts[0], truth, DigitalInput(3.0, 2.0, 5.0, 20_000.0), SETTINGS)
    (row,) = c.rows()
    assert row["bounce_count"] == [1, 0]
    assert c.summary()["bounce_count"] == [1, 0]


def test_sampler_overcounts_an_excursion_below_ninety_percent():
    # a 60 us excursion to 80 % of the open-circuit voltage: no bounce by the rule, but a CMOS-like input
    # with VT+ = 3.0 V of 5 V (60 %) sees the contact open
    cap = make_with([(1_300_000.0, 0.0), (1_300_100.0, 4.0), (1_360_000.0, 4.0), (1_360_100.0, 0.0)])
    truth = measure_capture(cap, 0, fraction_levels(5.0), SETTINGS)
    c = compare(cap, cap.volts[0], truth, DigitalInput(3.0, 2.0, 5.0, 1_000.0), SETTINGS)
    (row,) = c.rows()
    assert row["bounce_count"] == [0, 1]
    assert row["bounce_us"][0] == 0.0 and row["bounce_us"][1] > 250.0
    s = c.summary()
    assert s["matched"] == 1 and s["bounce_us_difference"]["max"] > 250.0
