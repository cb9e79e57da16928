"""The failure rule of docs/store.md (our own definition; the signs follow common practice, no source:
a welded contact does not open, a missed make does not close, chatter is unwanted opening while closed)."""

import numpy as np

from benchlog.analysis._types import BREAK, INCOMPLETE, MAKE, MISSED, NO_CHANGE, STUCK, empty_actuations
from benchlog.recorder import LifeJudge


def rows(channel, cycles, *, make_flags=0, break_flags=0, make_chatter=0):
    cycles = list(cycles)
    a = empty_actuations(2 * len(cycles))
    a["channel"] = channel
    a["cycle"] = np.repeat(cycles, 2)
    a["kind"] = np.tile([MAKE, BREAK], len(cycles))
    a["flags"][a["kind"] == MAKE] = make_flags
    a["flags"][a["kind"] == BREAK] = break_flags
    a["chatter"][a["kind"] == MAKE] = make_chatter
    return a


def test_welded_after_consecutive_cycles_fails_at_streak_start():
    j = LifeJudge(fail_after=3)
    assert j.push(rows(0, range(10))) == []
    assert j.push(rows(0, range(10, 12), make_flags=NO_CHANGE, break_flags=STUCK)) == []
    (f,) = j.push(rows(0, range(12, 14), make_flags=NO_CHANGE, break_flags=STUCK))
    assert (f.channel, f.cycle, f.mode) == (0, 10, "welded")
    assert j.push(rows(0, range(14, 30), break_flags=STUCK)) == []  # judged once


def test_a_clean_cycle_restarts_the_count():
    j = LifeJudge(fail_after=3)
    batch = np.concatenate(
        [
            rows(1, [0, 1], make_flags=MISSED, break_flags=NO_CHANGE),
            rows(1, [2]),
            rows(1, [3, 4], make_flags=MISSED, break_flags=NO_CHANGE),
            rows(1, [5, 6]),
        ]
    )
    assert j.push(batch) == [] and j.finish() == []
    (f,) = j.push(rows(1, [7, 8, 9, 10], make_flags=STUCK, break_flags=NO_CHANGE))
    assert (f.cycle, f.mode) == (7, "missed_make")


def test_neutral_cycles_neither_count_nor_reset():
    j = LifeJudge(fail_after=3)
    batch = np.concatenate(
        [
            rows(2, [0], break_flags=STUCK),
            rows(2, [1], make_flags=INCOMPLETE, break_flags=INCOMPLETE),
            rows(2, [2], break_flags=STUCK),
            rows(2, [3], break_flags=STUCK),
            rows(2, [4]),
        ]
    )
    (f,) = j.push(batch)
    assert (f.cycle, f.mode) == (0, "welded")


def test_a_cycle_split_across_batches_is_judged_whole():
    j = LifeJudge(fail_after=2)
    # make of cycle 5 in one batch (chatter), its break in the next (clean): the cycle has chatter
    a = rows(3, [4, 5], make_chatter=2)
    assert j.push(a[:-1]) == []
    assert j.push(a[-1:]) == []
    (f,) = j.finish()
    assert (f.cycle, f.mode) == (4, "chatter")


def test_chatter_within_the_spec_allowance_is_not_a_failure():
    # allowance: 2 events per 100 cycles; an isolated event every 60 cycles stays within it
    j = LifeJudge(fail_after=2, chatter={0: (2, 100)})
    cyc = np.arange(600)
    a = rows(0, cyc)
    a["chatter"][(a["kind"] == MAKE) & (a["cycle"] % 60 == 0)] = 1
    assert j.push(a) == [] and j.finish() == []
    # then chatter on every cycle: over the allowance from the third event on
    b = rows(0, range(600, 610), make_chatter=1)
    (f,) = j.push(b)
    assert f.mode == "chatter" and f.cycle == 601


def test_channels_are_judged_independently():
    j = LifeJudge(fail_after=2)
    batch = np.concatenate([rows(0, range(5)), rows(1, range(5), break_flags=STUCK)])
    batch = batch[np.argsort(batch["cycle"], kind="stable")]  # interleaved as they arrive
    (f,) = j.push(batch)
    assert f.channel == 1 and f.cycle == 0
