"""Edges by the voltage definitions, checked against hand-built traces and a plain reference loop."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchlog.analog import (
    Capture,
    Levels,
    derive_edges,
    fraction_levels,
    measure_capture,
    open_circuit_level,
)
from benchlog.analog import _edges as edges_module
from benchlog.analysis import MAKE, AnalysisSettings
from benchlog.errors import DataError

from ._traces import make_with_reopening, piecewise

SETTINGS = AnalysisSettings(settle_ns=2_000_000)


def reopening_counted(peak_fraction: float, above_ns: float) -> tuple[int, float]:
    cap = piecewise(make_with_reopening(5.0, peak_fraction, above_ns), 10.0, 8_000_000.0)
    m = measure_capture(cap, 0, fraction_levels(5.0), SETTINGS)
    make = m.actuations[m.actuations["kind"] == MAKE]
    assert len(make) == 1
    return int(make["bounce_count"][0]), float(make["bounce_us"][0])


# The rule: a contact counts as open (a bounce, or chatter) when the voltage across it reaches at least
# 90 % of the open-circuit voltage for at least 10 us (MIL-PRF-39016, MIL-STD-202 method 310; from
# memory). Checked on hand-built traces at the rule's edges.
def test_ten_microsecond_rule_at_its_edge():
    assert reopening_counted(1.0, 9_900.0) == (0, 0.0)
    count, bounce = reopening_counted(1.0, 10_100.0)
    assert count == 1
    # bounce time: the first fall through 10 % (1 ms + 0.9 ramp) to the last one, 0.9 ramp into the
    # reopening's falling ramp: 1.2 ms + ramp + flat top (10.1 us - 0.2 ramp) + 0.9 ramp
    first, last = 1_000_090.0, 1_200_000.0 + 100.0 + (10_100.0 - 20.0) + 90.0
    assert bounce == pytest.approx((last - first) / 1e3, abs=0.011)


def test_ninety_percent_rule_at_its_edge():
    assert reopening_counted(0.89, 50_000.0)[0] == 0
    assert reopening_counted(0.91, 50_000.0)[0] == 1


def reference_states(v: list[float], hi: float, lo: float) -> list[tuple[int, int]]:
    """Plain loop: (sample index, new state) at every change of a two-threshold comparator."""
    out, state = [], -1
    for k, x in enumerate(v):
        new = 0 if x >= hi else 1 if x <= lo else state
        if state != -1 and new != state:
            out.append((k, new))
        state = new
    return out


@settings(max_examples=150, deadline=None)
@given(
    st.lists(st.floats(-1.0, 6.0, allow_nan=False), min_size=2, max_size=300),
    st.floats(0.5, 4.5),
    st.floats(0.05, 3.0),
    st.sampled_from([3, 7, 1 << 20]),
)
def test_hysteresis_matches_a_reference_loop(v, hi, width, block):
    # reference: the textbook comparator with hysteresis written as a plain loop over samples
    lo = hi - width
    old = edges_module.BLOCK
    edges_module.BLOCK = block
    try:
        k, lvl, _ = edges_module._states(np.array(v), hi, lo)
    finally:
        edges_module.BLOCK = old
    assert list(zip(k.tolist(), lvl.tolist(), strict=True)) == reference_states(v, hi, lo)
    cap = Capture("r", ("v",), (np.array(v),), 0.0, 1e-6)
    e = derive_edges(cap, np.array(v), Levels(hi, lo))
    # crossing times lie between the sample before and the sample where the state changed
    assert np.all(e.t_s <= k * 1e-6 + 1e-15) and np.all(e.t_s >= (k - 1) * 1e-6 - 1e-15)


def test_crossing_times_are_interpolated():
    cap = piecewise([(0, 5.0), (1000, 5.0), (2000, 0.0), (5000, 0.0), (5500, 5.0), (9000, 5.0)], 100.0, 9000)
    e = derive_edges(cap, cap.volts[0], Levels(4.5, 0.5))
    # falling 5 -> 0 over 1000 ns crosses 0.5 V at 1900 ns; rising over 500 ns crosses 4.5 V at 5450 ns
    assert e.initial == 0 and e.level.tolist() == [1, 0]
    assert e.t_s * 1e9 == pytest.approx([1900.0, 5450.0], abs=1e-6)


def test_no_clear_open_circuit_level():
    rng = np.random.default_rng(1)
    with pytest.raises(DataError, match="no clear open-circuit level"):
        open_circuit_level(rng.uniform(0, 5, 100_000))
    with pytest.raises(DataError, match="no clear open-circuit level"):
        open_circuit_level(np.linspace(0, 5, 100_000))
    flat = np.where(np.arange(100_000) < 40_000, 12.0, 0.05) + rng.normal(0, 0.01, 100_000)
    assert open_circuit_level(flat) == pytest.approx(12.0, abs=0.01)


def test_sample_rate_too_slow_for_the_ten_microsecond_rule():
    cap = piecewise(make_with_reopening(5.0, 1.0, 20_000.0), 2_000.0, 8_000_000.0)
    with pytest.raises(DataError) as err:
        measure_capture(cap, 0, fraction_levels(5.0), SETTINGS)
    assert "too slow for the 10 us minimum duration" in str(err.value) and "\n" not in str(err.value)
    # at exactly a tenth of the duration per sample it measures
    ok = piecewise(make_with_reopening(5.0, 1.0, 20_000.0, ramp_ns=1000.0), 1_000.0, 8_000_000.0)
    assert len(measure_capture(ok, 0, fraction_levels(5.0), SETTINGS).actuations) == 1
