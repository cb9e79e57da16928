"""The recorder's drift watch over a long run: its memory stays flat however many windows a unit's life
has (it held every window of every judged unit before, about 1 MB a simulated hour on an 8-channel
bench), and it still raises the flag at the window the dashboard's judgement of the whole stored series
first raises it."""

from __future__ import annotations

import gc
import tracemalloc

import numpy as np

from benchlog.analysis import MAKE, coarse_windows, judge_drift, load_spec
from benchlog.recorder._drift import DriftWatch
from tests.recorder._helpers import start_run

WINDOW = 20  # cycles (start_run's rollup window)


def _rows(unit: int, p95: np.ndarray, first: int = 0) -> list[tuple]:
    """Rollup rows as RunWriter.take_rollups gives them, make bounce only: (unit_id, metric, kind,
    run_id, window_no, cycle_lo, cycle_hi, count, p50, p95, max, sum)."""
    return [
        (unit, "bounce_us", MAKE, 1, w, w * WINDOW, w * WINDOW + WINDOW - 1, WINDOW, v / 2, v, v * 1.2, 0.0)
        for w, v in enumerate(p95.tolist(), start=first)
    ]


def _watch(open_store):
    store = open_store()
    writer = start_run(store, [0], 10**7)
    unit = writer.units[0]
    return DriftWatch(writer, {0: load_spec("AG-MS5")}), unit


def test_the_watchs_memory_stays_flat_over_thousands_of_windows(open_store):
    watch, unit = _watch(open_store)
    rng = np.random.default_rng(5)
    steady = 1200.0 + rng.normal(0.0, 60.0, 11_000)  # make bounce p95, us; the part's limit is 3,000 us
    rows = _rows(unit, steady)
    for r in rows[:1000]:
        assert watch.push([r]) == []
    gc.collect()
    tracemalloc.start()
    try:
        before = tracemalloc.get_traced_memory()[0]
        for r in rows[1000:]:
            assert watch.push([r]) == []
        gc.collect()
        grown = tracemalloc.get_traced_memory()[0] - before
    finally:
        tracemalloc.stop()
    # 10,000 more windows: holding each one (four Python numbers in lists) grew the old watch by about
    # 420 kB; the coarse points (80 to 240 of them) and numpy's own small caches are a few tens of kB
    assert grown < 150_000, grown


def test_a_long_series_is_flagged_at_the_window_the_whole_series_first_flags(open_store):
    watch, unit = _watch(open_store)
    rng = np.random.default_rng(6)
    n_steady, n_rise = 1500, 600
    p95 = np.concatenate(
        [
            1200.0 + rng.normal(0.0, 60.0, n_steady),
            1200.0 + np.linspace(0, 2200, n_rise) + rng.normal(0, 60, n_rise),
        ]
    )
    rows = _rows(unit, p95)
    spec = load_spec("AG-MS5")
    lo = np.array([r[5] for r in rows])
    hi = np.array([r[6] for r in rows])
    cnt = np.array([r[7] for r in rows])
    expected = None
    for end in range(1, len(rows) + 1):
        rep = judge_drift(
            coarse_windows(lo[:end], hi[:end], cnt[:end], p95[:end]),
            spec.limit("make_bounce").max_value,
            spec.life.min_cycles,
            quick=True,
        )
        if rep is not None and rep.confirmed:
            expected = int(hi[end - 1])
            break
    assert expected is not None and expected > n_steady * WINDOW  # flagged, and only once it rose
    flagged = []
    for r in rows:
        flagged += watch.push([r])
        if flagged:
            break
    assert [(f.unit_id, f.metric, f.cycle) for f in flagged] == [(unit, "make_bounce", expected)]
