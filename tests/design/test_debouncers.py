"""Debouncer replays on hand-built contact sequences, with the outcomes counted by hand, and the
vectorised run-length versions against plain per-sample loops (common practice, no source)."""

from __future__ import annotations

import numpy as np
import pytest

from benchlog.design import compose_clips, confirm, integrator, lockout, replay, sample_runs, stable

from . import _reference as ref

MS = 1_000_000


def _edges(rows):
    t, lv = zip(*rows, strict=True)
    return np.array(t, np.int64), np.array(lv, np.int8)


# One make, hand-drawn, sampled every 1 ms (samples at 0, 1, 2, ... ms):
# closes at 10.5 ms, reopens 12.5-13.1 ms, closed from 13.1 ms. Samples: 10 open, 11 closed, 12 closed,
# 13 open, 14 closed onwards. So the sampled input is 0 (..10), 1 (11-12), 0 (13), 1 (14..).
MAKE = [(10_500_000, 1), (12_500_000, 0), (13_100_000, 1), (40 * MS, 0)]


def test_sampling_by_hand():
    t, lv = _edges(MAKE)
    runs = sample_runs(t, lv, MS)
    assert runs.value.tolist() == [0, 1, 0, 1, 0]
    assert runs.start.tolist() == [10, 11, 13, 14, 40]
    assert runs.length.tolist()[:4] == [1, 2, 1, 26]


def test_bounce_shorter_than_a_sample_is_not_seen():
    # reopening 12.2-12.9 ms contains no sample instant: the debouncer never sees it
    t, lv = _edges([(10_500_000, 1), (12_200_000, 0), (12_900_000, 1)])
    assert sample_runs(t, lv, MS).value.tolist() == [0, 1]


@pytest.mark.parametrize(
    ("n", "expected"),
    [
        # lockout 1: accept 11; free at 12 (closed, no change); 13 open -> accept; 14 closed -> accept
        (1, [(11, 1), (13, 0), (14, 1)]),
        # lockout 2: accept 11; free at 13: open -> accept (false); free at 15: closed -> accept
        (2, [(11, 1), (13, 0), (15, 1)]),
        # lockout 3: accept 11; free at 14: closed, nothing more
        (3, [(11, 1)]),
    ],
)
def test_lockout_by_hand(n, expected):
    t, lv = _edges(MAKE[:3])
    at, v = lockout(sample_runs(t, lv, MS, t_end_ns=20 * MS), n)
    assert list(zip(at.tolist(), v.tolist(), strict=True)) == expected


@pytest.mark.parametrize(
    ("n", "expected"),
    [
        (1, [(11, 1), (13, 0), (14, 1)]),  # follows every sample
        (2, [(12, 1)]),  # 11-12 is two closed samples: accepted at 12; the single open sample is ignored
        (3, [(16, 1)]),  # needs 14, 15, 16
    ],
)
def test_stable_by_hand(n, expected):
    t, lv = _edges(MAKE[:3])
    at, v = stable(sample_runs(t, lv, MS, t_end_ns=20 * MS), n)
    assert list(zip(at.tolist(), v.tolist(), strict=True)) == expected


def test_integrator_by_hand():
    # ceiling 3, counter from 0: 11->1, 12->2, 13->1, 14->2, 15->3 = accepted at 15
    t, lv = _edges(MAKE[:3])
    at, v = integrator(sample_runs(t, lv, MS, t_end_ns=20 * MS), 3)
    assert list(zip(at.tolist(), v.tolist(), strict=True)) == [(15, 1)]
    # ceiling 2: 11->1, 12->2 accepted at 12; 13->1, 14->2: no further change
    at, v = integrator(sample_runs(t, lv, MS, t_end_ns=20 * MS), 2)
    assert list(zip(at.tolist(), v.tolist(), strict=True)) == [(12, 1)]


def test_confirm_by_hand():
    t, lv = _edges(MAKE[:3])
    runs = sample_runs(t, lv, MS, t_end_ns=20 * MS)
    # make window 2: change seen at 11, confirmed at 13? sample 13 is open -> back to waiting;
    # change seen again at 14, confirmed at 16 (closed)
    at, v = confirm(runs, 2, 2)
    assert list(zip(at.tolist(), v.tolist(), strict=True)) == [(16, 1)]
    # make window 1: seen at 11, confirmed at 12 (closed) -> accepted; then the open sample 13 starts a
    # break window of 1, confirmed at 14? closed -> rejected
    at, v = confirm(runs, 1, 1)
    assert list(zip(at.tolist(), v.tolist(), strict=True)) == [(12, 1)]


def test_compose_clips_matches_sequential_clipping():
    rng = np.random.default_rng(5)
    d = rng.integers(-7, 8, 300)
    lo, hi = np.zeros(300, np.int64), np.full(300, 5, np.int64)
    dd, ll, hh = compose_clips(d, lo, hi)
    for c0 in range(6):
        c, seq = c0, []
        for x in d:
            c = min(max(c + x, 0), 5)
            seq.append(c)
        assert np.array_equal(np.minimum(np.maximum(c0 + dd, ll), hh), seq)


def test_run_length_replays_match_per_sample_loops():
    rng = np.random.default_rng(11)
    for _ in range(60):
        m = int(rng.integers(2, 50))
        t = np.cumsum(rng.integers(1, 4000, m) * rng.choice([1, 1, 1, 25], m)) + int(rng.integers(0, 5000))
        lv = rng.integers(0, 2, m)
        ts = int(rng.integers(100, 3000))
        runs = sample_runs(t, lv, ts)
        ks, x = ref.samples(t, lv, ts)
        for n in (1, 2, 3, 6):
            for name, want in (
                ("stable", ref.stable(ks, x, n)),
                ("integrator", ref.integrator(ks, x, n)),
                ("lockout", ref.lockout(ks, x, n)),
            ):
                at, v = replay(runs, name, n)
                assert list(zip(at.tolist(), v.tolist(), strict=True)) == [(int(a), int(b)) for a, b in want]
            for brk in (0, 2, 5):
                at, v = confirm(runs, n, brk)
                want = [(int(a), int(b)) for a, b in ref.confirm(ks, x, n, brk)]
                assert list(zip(at.tolist(), v.tolist(), strict=True)) == want


@pytest.mark.parametrize("kind, n, brk", [("lockout", 3, None), ("confirm", 2, 5), ("confirm", 6, 1)])
def test_several_recordings_replayed_together_as_each_alone(kind, n, brk):
    from benchlog.design._debouncers import replay_many

    from ._bouncing import bouncing

    many = []
    for seed, start_ms in ((1, 0), (2, 7), (3, 1000)):  # overlapping and distinct time spans
        e = bouncing(40, 40 * MS, np.log(2e6), 0.5, np.log(3e6), 0.5, seed=seed)
        many.append(sample_runs(e.t_ns + start_ms * MS, e.level, MS))
    many.append(sample_runs(*_edges(MAKE), MS))  # one short recording that starts closed-to-open
    together = replay_many(many, kind, n, brk)
    for runs, (at, val) in zip(many, together, strict=True):
        alone_at, alone_val = replay(runs, kind, n, brk)
        assert at.tolist() == alone_at.tolist() and val.tolist() == alone_val.tolist()


@pytest.mark.parametrize("kind", ["lockout", "confirm", "stable", "integrator"])
def test_a_parameter_grid_replayed_together_as_each_alone(kind):
    from benchlog.design._debouncers import replay_grid

    from ._bouncing import bouncing

    many = [sample_runs(*_edges(MAKE), MS)]
    for seed in (4, 5):
        e = bouncing(30, 40 * MS, np.log(2e6), 0.6, np.log(3e6), 0.6, seed=seed)
        many.append(sample_runs(e.t_ns, e.level, MS))
    params = [(1, 1), (2, 9), (7, 3), (12, 12), (30, 2)]
    grid = replay_grid(many, kind, params, join_runs=200)  # several chunks of parameters
    for (m, b), results in zip(params, grid, strict=True):
        for runs, (at, val) in zip(many, results, strict=True):
            alone_at, alone_val = replay(runs, kind, m, b)
            assert at.tolist() == alone_at.tolist() and val.tolist() == alone_val.tolist()
