"""Scoring and recommending firmware debouncers: hand-counted scores, then simulated bouncing contacts
whose bounce-time distribution is known."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from benchlog.analysis import BREAK, MAKE
from benchlog.design import Windows, bounce_figures, channel_record, design_software, group_edges, score

from ._bouncing import bouncing

MS = 1_000_000


def test_grouping_by_hand():
    # make at 10 ms with two reopenings, a 0.1 ms disturbance at 30 ms (returns: not an actuation),
    # break at 50 ms with one reclosing
    t = np.array([10.0, 10.3, 10.5, 11.0, 11.2, 30.0, 30.1, 50.0, 50.4, 51.0]) * MS
    lv = np.array([1, 0, 1, 0, 1, 0, 1, 0, 1, 0])
    rows = group_edges(t.astype(np.int64), lv, 5 * MS)
    assert rows["kind"].tolist() == [MAKE, BREAK]
    assert rows["t_first_ns"].tolist() == [10 * MS, 50 * MS]
    assert rows["t_settle_ns"].tolist() == [int(11.2 * MS), 51 * MS]
    rec = channel_record(t.astype(np.int64), lv, None, 0, 5 * MS, 80 * MS)
    figs = bounce_figures(rec)
    assert figs.bounce_ns.tolist() == [1.2 * MS, 1.0 * MS]
    # make: open 10.3-10.5 and 11.0-11.2 -> longest 0.2 ms, total 0.4 ms; break: closed 50.4-51.0
    assert figs.longest_ns.tolist() == pytest.approx([0.2 * MS, 0.6 * MS])
    assert figs.wrong_ns.tolist() == pytest.approx([0.4 * MS, 0.6 * MS])


def test_score_by_hand():
    win = Windows(
        np.array([0, 100, 200]),
        np.array([100, 200, 300]),
        np.array([1, 0, 1], np.int8),
        np.array([True, True, True]),
    )
    # row 0: clean (one change per window); row 1: window 0 bounces (1, 0, 1), window 1 missed,
    # window 2 then needs no change and gets none
    row = np.array([0, 0, 0, 1, 1, 1])
    t = np.array([5, 105, 205, 5, 7, 9])
    new = np.array([1, 0, 1, 1, 0, 1])
    s = score(win, row, t, new, np.array([0, 0], np.int8))
    assert s.false.tolist() == [[0, 0, 0], [2, 0, 0]]
    assert s.missed.tolist() == [[False, False, False], [False, True, False]]
    assert s.delay_ns[0].tolist() == [5, 5, 5]
    assert s.delay_ns[1, 0] == 5 and np.isnan(s.delay_ns[1, 1])


def test_score_of_an_output_that_never_changed():
    # a debouncer window longer than every run accepts nothing: each window needing a change is
    # missed and none is false (counted by hand)
    win = Windows(np.array([0, 100]), np.array([100, 200]), np.array([1, 0], np.int8), np.array([True, True]))
    none = np.zeros(0, np.int64)
    s = score(win, none, none, none.astype(np.int8), np.array([0, 0], np.int8))
    assert s.false.tolist() == [[0, 0], [0, 0]]
    assert s.missed.tolist() == [[True, False], [True, False]]
    assert np.isnan(s.delay_ns).all()


def test_score_matches_the_plain_definition_on_random_outputs():
    # windows with and without gaps between them, changes before, inside, between and after them
    from ._reference import score_rows

    rng = np.random.default_rng(7)
    for _ in range(400):
        nwin, nrow = int(rng.integers(1, 7)), int(rng.integers(1, 4))
        start = np.sort(rng.choice(100, nwin, replace=False)).astype(np.int64)
        end = np.concatenate((start[1:], [start[-1] + 10]))
        if rng.random() < 0.5:
            end = np.maximum(np.minimum(end, start + rng.integers(1, 15, nwin)), start + 1)
        target = rng.integers(0, 2, nwin).astype(np.int8)
        n = int(rng.integers(0, 12))
        row, t = rng.integers(0, nrow, n), rng.integers(-5, 130, n)
        new = rng.integers(0, 2, n).astype(np.int8)
        init = rng.integers(0, 2, nrow).astype(np.int8)
        s = score(Windows(start, end, target, np.ones(nwin, bool)), row, t, new, init)
        order = np.lexsort((t, row))
        changes = [[(int(t[i]), int(new[i])) for i in order if row[i] == r] for r in range(nrow)]
        for r, want in enumerate(score_rows(start, end, target, changes, init)):
            got = [
                (int(c), int(f), bool(m), None if np.isnan(d) else int(d))
                for c, f, m, d in zip(s.changes[r], s.false[r], s.missed[r], s.delay_ns[r], strict=True)
            ]
            assert got == want


@pytest.fixture(scope="module")
def design():
    # makes: bounce ~ lognormal(median 1 ms, sigma 0.4); breaks: median 2 ms, sigma 0.3
    e = bouncing(3000, 40 * MS, np.log(1e6), 0.4, np.log(2e6), 0.3, seed=3)
    rec = channel_record(e.t_ns, e.level, None, 0, 5 * MS, int(e.t_ns[-1]) + 20 * MS)
    return design_software([rec], 250_000, 1e-6, life_windows=3)


def test_recommendations_are_clean_and_cover_the_known_tail(design):
    # the break bounce time whose true exceedance probability is 1e-6 (scipy.stats.lognorm)
    true_q_ms = float(stats.lognorm.isf(1e-6, 0.3, scale=2e6)) / 1e6
    lock = design.choices["lockout"]
    assert lock.point is not None and lock.point.clean
    # the lockout must cover the break bounce at the target: within 20 % of the true quantile
    assert lock.point.window_ms == pytest.approx(true_q_ms, rel=0.2)
    assert lock.rate < 1e-5 and lock.rate_upper >= lock.rate
    for deb, c in design.choices.items():
        assert c.point is not None and c.point.false == 0 and c.point.missed == 0, deb
        assert c.point.judged == 6000


def test_sweep_false_transitions_fall_with_the_window(design):
    for deb in ("lockout", "stable", "integrator"):
        false = [p.false for p in design.sweeps[deb]]
        assert false[0] > 1000  # one-sample windows follow the bounce
        assert false[-1] == 0
    # the smallest clean lockout is at least the longest recorded bounce minus one sample, at most it
    bounce_max_ms = max(r.bounce_max_ms for r in design.life)
    first_clean = next(p for p in design.sweeps["lockout"] if p.false == 0 and p.missed == 0)
    assert first_clean.window_ms <= bounce_max_ms + 0.25


def test_life_windows_cover_every_actuation(design):
    assert sum(r.actuations for r in design.life) == 6000
    assert len(design.life) == 3
    for r in design.life:
        assert r.choices["lockout"][0] > 0


def _four_units(cycles: int):
    out = []
    for ch in range(4):
        e = bouncing(cycles, 40 * MS, np.log(1e6), 0.4, np.log(2e6), 0.3, seed=10 + ch, channel=ch)
        out.append(channel_record(e.t_ns, e.level, None, ch, 5 * MS, int(e.t_ns[-1]) + 20 * MS))
    return out


def test_a_long_recording_is_swept_in_bounded_memory(monkeypatch):
    # A full night (8 units x 400,000 actuations) once held every settings x actuations matrix of every
    # debouncer at once: 11.6 GB at the peak. The sweep now scores a bounded block of settings at a time
    # and keeps only per-setting figures, so its peak follows the block, not the number of settings.
    import tracemalloc

    from benchlog.design import _software

    recs = _four_units(5000)
    whole = design_software(recs, 250_000, 1e-6, life_windows=3)
    monkeypatch.setattr(_software, "CELLS", 1 << 15, raising=False)  # one setting at a time
    tracemalloc.start()
    try:
        base = tracemalloc.get_traced_memory()[0]
        blocked = design_software(recs, 250_000, 1e-6, life_windows=3)
        peak = tracemalloc.get_traced_memory()[1] - base
    finally:
        tracemalloc.stop()
    # the same sweep, choices and life windows, whatever the block
    assert blocked.sweeps == whole.sweeps
    assert blocked.choices.keys() == whole.choices.keys()
    for deb, c in whole.choices.items():
        assert blocked.choices[deb].point == c.point, deb
    assert [(r.cycle_lo, r.cycle_hi, r.actuations) for r in blocked.life] == [
        (r.cycle_lo, r.cycle_hi, r.actuations) for r in whole.life
    ]
    for a, b in zip(blocked.life, whole.life, strict=True):
        assert str(a.choices) == str(b.choices)  # NaN delays compare equal as text
    # 40,000 actuations, 200 settings: 21 MB measured with the blocks, 505 MB before them
    n_rows = sum(len(p) for p in whole.sweeps.values())
    assert n_rows > 40
    assert peak < 40e6, f"peak {peak / 1e6:.0f} MB for {n_rows} settings"
