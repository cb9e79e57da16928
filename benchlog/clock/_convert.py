"""Exact tick -> nanosecond conversion and modular counter arithmetic."""

from __future__ import annotations

import numpy as np

NS_PER_S = 1_000_000_000


def ticks_to_ns(ticks: int, clock_hz: int) -> int:
    """floor(ticks * 1e9 / clock_hz), exactly (Python integers)."""
    return (ticks * NS_PER_S) // clock_hz


def ticks_to_ns_array(ticks: np.ndarray, clock_hz: int) -> np.ndarray:
    """floor(ticks * 1e9 / clock_hz) for int64 `ticks`, exactly and without int64 overflow.

    Split ticks = q * clock_hz + r (0 <= r < clock_hz < 2**32): then the result is q * 1e9 + floor(r * 1e9 /
    clock_hz), and r * 1e9 < 4.3e18 stays inside int64. Floor division keeps negative ticks exact too.
    """
    if NS_PER_S % clock_hz == 0:
        # a clock of a whole number of ns per tick (1 MHz, 10 MHz, ...): the same, by one product
        # (q * hz + r) * m, equal to the general form below even where int64 wraps
        return ticks.astype(np.int64, copy=False) * np.int64(NS_PER_S // clock_hz)
    hz = np.int64(clock_hz)
    q, r = np.divmod(ticks.astype(np.int64, copy=False), hz)
    return q * np.int64(NS_PER_S) + (r * np.int64(NS_PER_S)) // hz


def signed_delta(new: int, old: int, bits: int) -> int:
    """(new - old) modulo 2**bits, taken into (-2**(bits-1), 2**(bits-1)]."""
    m = 1 << bits
    d = (new - old) & (m - 1)
    return d - m if d > m >> 1 else d


def signed_deltas(ticks: np.ndarray, first_prev: int, bits: int) -> np.ndarray:
    """Signed modular deltas of consecutive uint64 `ticks`, the first one against `first_prev`."""
    t = ticks.astype(np.uint64, copy=False)
    prev = np.empty_like(t)
    prev[0] = np.uint64(first_prev)
    prev[1:] = t[:-1]
    d = t - prev  # uint64 arithmetic wraps modulo 2**64
    if bits == 64:
        return d.view(np.int64)
    m = np.uint64(1 << bits)
    d &= m - np.uint64(1)
    half = np.uint64(1 << (bits - 1))
    d[d > half] -= m  # wraps in uint64 to the two's complement of the negative delta
    return d.view(np.int64)
