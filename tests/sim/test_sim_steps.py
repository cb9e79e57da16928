"""The simulator's units do not depend on how sampler time was cut into steps (the wall clock does
that cutting on a pseudo-terminal): one seed, one set of edges, whatever the steps."""

from __future__ import annotations

import numpy as np

from benchlog.sim import Bench, load_preset
from benchlog.wire import Go, Plan


def edges_sent(step_ns) -> np.ndarray:
    bench = Bench(load_preset("demo"), seed=11)
    bench.start()
    for ch in range(16):
        bench.command(Plan(ch, 50_000, 50_000, 700))
    bench.command(Go())
    t = 0
    end = 75 * 10**9  # 750 cycles of 100 ms: past the plan's end
    i = 0
    while t < end:
        t = min(end, t + step_ns(i))
        bench.step_bytes(t)
        i += 1
    return bench.truth.sent


def test_same_edges_whatever_the_steps():
    rng = np.random.default_rng(0)
    jitter = rng.integers(1, 4 * 10**9, 10_000)
    even = edges_sent(lambda i: 10**9)  # one second of sampler time a step
    uneven = edges_sent(lambda i: int(jitter[i]))  # from a millisecond to four seconds
    tiny = edges_sent(lambda i: 37 * 10**6 if i % 2 else 1_500 * 10**6)
    assert len(even) > 16 * 700 * 2
    assert np.array_equal(even, uneven) and np.array_equal(even, tiny)
