"""Exact tick -> ns conversion and modular deltas."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
from hypothesis import assume, given
from hypothesis import strategies as st

from benchlog.clock import signed_delta, ticks_to_ns, ticks_to_ns_array


@given(st.integers(-(2**40), 2**45), st.integers(1, 2**32 - 1))
def test_ticks_to_ns_is_exact_floor(ticks, hz):
    # reference: Python's fractions.Fraction (exact rational arithmetic)
    assert ticks_to_ns(ticks, hz) == int(Fraction(ticks * 10**9, hz).__floor__())


@given(st.lists(st.integers(-(2**40), 2**50), min_size=1, max_size=50), st.integers(1, 2**32 - 1))
def test_vector_conversion_matches_scalar(ticks, hz):
    assume(all(abs(t) * 10**9 // hz < 2**62 for t in ticks))  # int64 ns: runs shorter than 146 years
    got = ticks_to_ns_array(np.asarray(ticks, np.int64), hz)
    assert got.tolist() == [ticks_to_ns(t, hz) for t in ticks]


def test_days_of_ticks_lose_nothing():
    # 30 days at 16 MHz: float64 would be off; integer arithmetic is exact
    ticks = 30 * 86400 * 16_000_000 + 7
    assert ticks_to_ns(ticks, 16_000_000) == 30 * 86400 * 10**9 + 437  # 7 ticks of 62.5 ns, floored
    assert ticks_to_ns_array(np.array([ticks], np.int64), 16_000_000)[0] == 30 * 86400 * 10**9 + 437


def test_signed_delta_wraps():
    assert signed_delta(0x0005, 0xFFF0, 16) == 0x15
    assert signed_delta(0xFFF0, 0x0005, 16) == -0x15
    assert signed_delta(3, 2**64 - 2, 64) == 5
    assert signed_delta(0x8000, 0, 16) == 0x8000  # exactly half a wrap counts forwards


def test_whole_nanosecond_clocks_are_exact_floor():
    # reference: Python's fractions.Fraction; clocks with a whole number of ns per tick take a product
    rng = np.random.default_rng(3)
    for hz in (1, 8, 1_000, 1_000_000, 8_000_000, 10_000_000, 125_000_000, 1_000_000_000, 16_000_000):
        top = min(2**45, 2**62 * hz // 10**9)  # int64 ns, as above
        ticks = np.concatenate((rng.integers(-top, top, 500), [0, 1, -1, top, -top]))
        got = ticks_to_ns_array(ticks.astype(np.int64), hz).tolist()
        assert got == [int(Fraction(int(t) * 10**9, hz).__floor__()) for t in ticks], hz
