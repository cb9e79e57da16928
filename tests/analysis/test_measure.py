"""Hand-built edge sequences with metrics computed by hand in the comments beside them."""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchlog.analysis import (
    BREAK,
    CHATTER,
    DEFAULT_CHATTER_THRESHOLD_NS,
    FREE_RUNNING,
    GLITCHY,
    INCOMPLETE,
    MAKE,
    MISSED,
    NO_CHANGE,
    STUCK,
    AnalysisSettings,
    Analyzer,
    measure,
    summarize,
)
from benchlog.errors import ConfigError
from benchlog.events import DISCONNECT, Incident, TimedDrives, TimedEdges

US = 1_000
MS = 1_000_000
SETTINGS = AnalysisSettings(settle_ns=5 * MS)


def assert_rows_equal(got: np.ndarray, want: np.ndarray) -> None:
    assert got.dtype == want.dtype and len(got) == len(want)
    for name in want.dtype.names:
        np.testing.assert_array_equal(got[name], want[name], err_msg=name)  # NaN equals NaN here


def E(*rows):  # (t_ns, channel, level)
    return TimedEdges.of(list(rows))


def D(*rows):
    return TimedDrives.of(list(rows))


def one_cycle():
    """Drive on at 0, make at 5 ms with two reopenings; drive off at 50 ms, break at 53 ms, one reclose."""
    edges = E(
        (5 * MS, 0, 1),  # first touch: operate time 5000 us
        (5 * MS + 100 * US, 0, 0),  # reopening 1: 200 us open
        (5 * MS + 300 * US, 0, 1),
        (5 * MS + 500 * US, 0, 0),  # reopening 2: 100 us open
        (5 * MS + 600 * US, 0, 1),  # settles: bounce 600 us
        (53 * MS, 0, 0),  # first separation: release time 3000 us
        (53 * MS + 200 * US, 0, 1),  # one reclosure, 50 us closed
        (53 * MS + 250 * US, 0, 0),  # settles open: bounce 250 us
    )
    drives = D((0, 0, 1), (50 * MS, 0, 0), (100 * MS, 0, 1))
    return edges, drives


def test_drive_anchored_make_and_break_hand_computed():
    edges, drives = one_cycle()
    rows = measure(edges, drives, settings=SETTINGS)
    mk, br = rows[0], rows[1]
    assert (mk["kind"], br["kind"]) == (MAKE, BREAK)
    assert mk["t_start_ns"] == 0 and mk["t_first_ns"] == 5 * MS and mk["t_settle_ns"] == 5_600_000
    assert mk["transit_us"] == 5000.0  # drive to first make, bounce excluded
    assert mk["bounce_us"] == 600.0  # first make (5.0 ms) to final stable close (5.6 ms)
    assert mk["bounce_count"] == 2
    assert mk["longest_gap_us"] == 200.0  # 5.1 -> 5.3 ms
    assert mk["wrong_state_us"] == 300.0  # 200 + 100 us open after first touch
    assert mk["drive_level"] == 1 and mk["cycle"] == 0 and mk["flags"] == 0
    assert br["transit_us"] == 3000.0 and br["bounce_us"] == 250.0 and br["bounce_count"] == 1
    assert br["longest_gap_us"] == 50.0 and br["wrong_state_us"] == 50.0
    assert br["drive_level"] == 0 and br["cycle"] == 0 and br["t_end_ns"] == 100 * MS
    # the drive at 100 ms is the end of data: nothing after it to measure
    assert rows[2]["flags"] & INCOMPLETE and math.isnan(rows[2]["bounce_us"])


def test_normally_closed_contact_breaks_on_drive():
    # opens at 2.0 ms, recloses 2.04-2.09 ms (50 us), open for good from 2.09 ms
    edges = E((2 * MS, 3, 0), (2 * MS + 40 * US, 3, 1), (2 * MS + 90 * US, 3, 0), (52 * MS, 3, 1))
    drives = D((0, 3, 1), (50 * MS, 3, 0), (90 * MS, 3, 1))
    rows = measure(edges, drives, settings=SETTINGS.with_(normally_closed=frozenset({3})))
    assert rows[0]["kind"] == BREAK and rows[0]["transit_us"] == 2000.0  # operate time on an NC contact
    assert rows[0]["bounce_us"] == 90.0 and rows[0]["bounce_count"] == 1 and rows[0]["longest_gap_us"] == 50.0
    assert rows[1]["kind"] == MAKE and rows[1]["transit_us"] == 2000.0 and rows[1]["bounce_us"] == 0.0


def test_missed_make_and_stuck_contact():
    # cycle 0: touches at 5 ms, opens at 5.2 ms and stays open: missed make (bounce not measurable)
    # cycle 0 break: already open -> nothing to do (NO_CHANGE)
    # cycle 1: no edge at all -> stuck open, missed
    edges = E((5 * MS, 0, 1), (5 * MS + 200 * US, 0, 0))
    drives = D((0, 0, 1), (50 * MS, 0, 0), (100 * MS, 0, 1), (150 * MS, 0, 0), (200 * MS, 0, 1))
    rows = measure(edges, drives, settings=SETTINGS)
    assert rows[0]["flags"] & MISSED and not rows[0]["flags"] & STUCK
    assert (
        rows[0]["transit_us"] == 5000.0 and math.isnan(rows[0]["bounce_us"]) and rows[0]["t_settle_ns"] == -1
    )
    # one reopening (at 5.2 ms) that never ended: open from 5.2 ms to the 50 ms drive
    assert rows[0]["bounce_count"] == 1 and rows[0]["wrong_state_us"] == 44_800.0
    assert rows[1]["flags"] & NO_CHANGE
    assert rows[2]["flags"] & STUCK and rows[2]["flags"] & MISSED and rows[2]["t_first_ns"] == -1
    assert rows[2]["cycle"] == 1
    # docs/metrics.md: a missed make's wrong_state_us runs to the end of the window; a stuck contact
    # never left the old state, so all of its window (drive at 100 ms to the next at 150 ms) counts
    assert rows[2]["wrong_state_us"] == 50_000.0


def test_summary_counts_bounce_only_where_it_times_bounce():
    # IEC 61810-1 bounce time (from memory) has no value for a make that never settled; the count of
    # reopenings belongs to the same bounce, so a missed or stuck make is left out of both (hand count:
    # a good make with two reopenings, a missed make, a stuck make -> one make counted, p50 2)
    edges, _ = one_cycle()
    later = [(105 * MS, 0, 1), (105 * MS + 200 * US, 0, 0)]  # cycle 1 touches, falls open: missed
    # cycle 2 (drive on at 200 ms): no edge at all, stuck open
    steps = [(k * 50 * MS, 0, 1 - k % 2) for k in range(7)]
    rows = measure(
        E(*zip(edges.t_ns.tolist(), edges.channel.tolist(), edges.level.tolist(), strict=True), *later),
        D(*steps),
        settings=SETTINGS,
    )
    makes = rows[rows["kind"] == MAKE]
    assert makes["flags"][1] & MISSED and makes["flags"][2] & STUCK
    (ch,) = summarize(rows)
    assert ch["make_bounce_us"]["n"] == 1
    assert ch["make_bounce_count"]["n"] == 1 and ch["make_bounce_count"]["p50"] == 2.0


def test_welded_contact_never_opens():
    edges = E((4 * MS, 0, 1))
    drives = D((0, 0, 1), (50 * MS, 0, 0), (100 * MS, 0, 1), (150 * MS, 0, 0))
    rows = measure(edges, drives, settings=SETTINGS)
    assert rows[0]["flags"] == 0
    assert rows[1]["flags"] & STUCK and rows[1]["kind"] == BREAK  # failed to open
    assert rows[2]["flags"] & NO_CHANGE


def test_glitches_are_counted_apart_from_bounce():
    s = SETTINGS.with_(glitch_floor_ns=2 * US)
    edges = E(
        (5 * MS, 0, 1),
        (5 * MS + 100 * US, 0, 0),  # 1 us opening: a glitch, not a bounce
        (5 * MS + 101 * US, 0, 1),
        (5 * MS + 300 * US, 0, 0),  # 100 us opening: a bounce
        (5 * MS + 400 * US, 0, 1),
    )
    rows = measure(edges, D((0, 0, 1), (50 * MS, 0, 0)), settings=s)
    mk = rows[0]
    assert mk["glitches"] == 1 and mk["flags"] & GLITCHY
    assert mk["bounce_count"] == 1 and mk["bounce_us"] == 400.0 and mk["wrong_state_us"] == 100.0


def test_pulse_below_resolution_is_a_glitch_and_odd_runs_keep_the_first_edge():
    s = SETTINGS.with_(resolution_ns=1 * US)
    # three edges within one tick: net change, the first edge stands for the transition
    edges = E(
        (5 * MS, 0, 1), (5 * MS, 0, 0), (5 * MS, 0, 1), (5 * MS + 200 * US, 0, 0), (5 * MS + 300 * US, 0, 1)
    )
    rows = measure(edges, D((0, 0, 1), (50 * MS, 0, 0)), settings=s)
    assert rows[0]["t_first_ns"] == 5 * MS and rows[0]["glitches"] == 1 and rows[0]["bounce_count"] == 1
    assert rows[0]["bounce_us"] == 300.0


def test_chatter_after_settling_counts_openings_at_the_threshold():
    edges = E(
        (5 * MS, 0, 1),  # settles at once
        (20 * MS, 0, 0),  # 50 us opening: chatter
        (20 * MS + 50 * US, 0, 1),
        (30 * MS, 0, 0),  # 5 us opening: below the 10 us threshold
        (30 * MS + 5 * US, 0, 1),
        (40 * MS, 0, 0),  # exactly 10 us: counts
        (40 * MS + 10 * US, 0, 1),
    )
    rows = measure(edges, D((0, 0, 1), (50 * MS, 0, 0)), settings=SETTINGS)
    assert rows[0]["bounce_us"] == 0.0 and rows[0]["chatter"] == 2 and rows[0]["flags"] & CHATTER
    rows = measure(edges, D((0, 0, 1), (50 * MS, 0, 0)), settings=SETTINGS.with_(chatter_threshold_ns=1 * US))
    assert rows[0]["chatter"] == 3


def test_default_chatter_threshold_is_the_military_10_us():
    # 10 us: the contact-chatter threshold of several military relay specifications
    # (MIL-PRF-39016; MIL-STD-202 method 310 chatter monitoring) -- from memory.
    assert DEFAULT_CHATTER_THRESHOLD_NS == 10_000
    assert AnalysisSettings().chatter_threshold_ns == 10_000


def test_free_running_groups_and_disturbances():
    s = AnalysisSettings(settle_ns=5 * MS)
    edges = E(
        (100 * MS, 2, 1),  # a hand closes the switch: bounce 300 us, 1 reopening of 100 us
        (100 * MS + 100 * US, 2, 0),
        (100 * MS + 200 * US, 2, 1),
        (100 * MS + 300 * US, 2, 0),
        (100 * MS + 400 * US, 2, 1),
        (400 * MS, 2, 0),  # a knock while closed: 30 us opening, after a long quiet -> chatter
        (400 * MS + 30 * US, 2, 1),
        (900 * MS, 2, 0),  # release: clean break
    )
    rows = measure(edges, settings=s)
    assert len(rows) == 2
    mk, br = rows
    assert mk["flags"] & FREE_RUNNING and mk["kind"] == MAKE and mk["t_start_ns"] == 100 * MS
    assert math.isnan(mk["transit_us"]) and mk["bounce_us"] == 400.0 and mk["bounce_count"] == 2
    assert mk["chatter"] == 1 and mk["t_end_ns"] == 900 * MS
    # the break is the last edge: data ends before it could be stable for the settle window
    assert br["kind"] == BREAK and br["flags"] & INCOMPLETE
    rows = Analyzer(s).push(edges, until_ns=950 * MS)  # the caller vouches for data to 950 ms
    assert len(rows) == 1  # the break's stable period is still open
    assert (mk["cycle"], br["cycle"]) == (0, 0)


def test_form_c_gap_and_overlap():
    s = SETTINGS.with_(form_c=((0, 1),))
    edges = E(
        (2 * MS, 1, 0),  # NC opens at 2.0 ms, recloses, settles open at 2.3 ms
        (2 * MS + 100 * US, 1, 1),
        (2 * MS + 300 * US, 1, 0),
        (2 * MS + 800 * US, 0, 1),  # NO first makes at 2.8 ms: break-before-make gap 500 us
        (52 * MS, 0, 0),  # release: NO opens, settles at 52.0 ms
        (51 * MS + 900 * US, 1, 1),  # NC closes 100 us before NO opened: overlap -100 us
    )
    drives = D((0, 0, 1), (50 * MS, 0, 0), (100 * MS, 0, 1))
    rows = measure(edges, drives, settings=s)
    op = rows[rows["t_start_ns"] == 0]
    assert sorted(op["kind"].tolist()) == [MAKE, BREAK]
    assert np.all(op["transfer_us"] == 500.0)
    rel = rows[rows["t_start_ns"] == 50 * MS]
    assert np.all(rel["transfer_us"] == -100.0)
    nc = rows[(rows["channel"] == 1) & (rows["t_start_ns"] == 0)][0]
    assert nc["kind"] == BREAK and nc["transit_us"] == 2000.0 and nc["bounce_us"] == 300.0


def test_incident_marks_overlapping_actuations_incomplete():
    edges, drives = one_cycle()
    gap = Incident(DISCONNECT, 52 * MS, 60 * MS, 0, 0, edges_lost=None)
    rows = measure(edges, drives, [gap], settings=SETTINGS)
    assert rows[0]["flags"] & INCOMPLETE == 0 and rows[0]["bounce_us"] == 600.0
    assert (
        rows[1]["flags"] & INCOMPLETE and math.isnan(rows[1]["bounce_us"]) and rows[1]["bounce_count"] == -1
    )
    other_channel = Incident(DISCONNECT, 52 * MS, 60 * MS, 0, 0, channel=5)
    rows = measure(edges, drives, [other_channel], settings=SETTINGS)
    assert rows[1]["flags"] & INCOMPLETE == 0


def test_every_chunk_split_gives_the_same_rows():
    edges, drives = one_cycle()
    whole = measure(edges, drives, settings=SETTINGS)
    for cut in range(len(edges) + 1):
        an = Analyzer(SETTINGS.with_(lateness_ns=0))
        idx = np.arange(len(edges))
        a = an.push(edges.select(idx < cut), D((0, 0, 1)))
        b = an.push(edges.select(idx >= cut), D((50 * MS, 0, 0), (100 * MS, 0, 1)))
        assert_rows_equal(np.concatenate((a, b, an.flush())), whole)


def test_push_returns_finished_actuations_only():
    edges, drives = one_cycle()
    an = Analyzer(SETTINGS.with_(lateness_ns=0))
    first = an.push(edges.select(edges.t_ns < 50 * MS), D((0, 0, 1)))
    assert len(first) == 0  # the make's stable period is still running
    second = an.push(edges.select(edges.t_ns >= 50 * MS), D((50 * MS, 0, 0), (100 * MS, 0, 1)))
    assert len(second) == 2 and second[0]["bounce_us"] == 600.0  # the break ends at the 100 ms drive


def test_repeated_level_edges_are_dropped_and_counted():
    edges = E((5 * MS, 0, 1), (5 * MS + 10 * US, 0, 1), (53 * MS, 0, 0))
    an = Analyzer(SETTINGS)
    rows = np.concatenate((an.push(edges, D((0, 0, 1), (50 * MS, 0, 0), (99 * MS, 0, 1))), an.flush()))
    assert an.counters.repeated_levels == 1 and rows[0]["bounce_us"] == 0.0


@pytest.mark.parametrize(
    "bad",
    [dict(settle_ns=0), dict(mode="sideways"), dict(form_c=((1, 1),)), dict(normally_closed=frozenset({16}))],
)
def test_impossible_settings_are_config_errors(bad):
    with pytest.raises(ConfigError):
        AnalysisSettings(**bad)


def test_endless_chatter_is_closed_early_to_bound_memory():
    s = SETTINGS.with_(max_pending_edges=50, lateness_ns=0)
    an = Analyzer(s)
    rows = [an.push(E((1 * MS, 0, 1)))]  # free-running make, then hours of 30 us openings every 10 ms
    for k in range(20):
        t0 = 10 * MS + k * 300 * MS
        t = t0 + np.arange(30) * 10 * MS
        ts = np.ravel(np.column_stack((t, t + 30 * US)))
        lv = np.tile(np.array([0, 1], np.uint8), 30)
        rows.append(an.push(TimedEdges(ts, np.zeros(60, np.uint8), lv)))
        assert len(an._channels[0].t) <= 50 + 60
    rows = np.concatenate(rows + [an.flush()])
    assert an.counters.closed_early > 0 and rows[0]["flags"] & INCOMPLETE
    driven = Analyzer(s)  # a driven channel closed early keeps measuring from its next drive
    edges, drives = one_cycle()
    out = driven.push(E(*[(200 * MS + i * 100 * US, 0, (i + 1) % 2) for i in range(60)]), D((150 * MS, 0, 0)))
    later = TimedEdges(edges.t_ns + 300 * MS, edges.channel, edges.level)
    out = np.concatenate(
        (
            out,
            driven.push(later, TimedDrives(drives.t_ns + 300 * MS, drives.channel, drives.level)),
            driven.flush(),
        )
    )
    measured = out[out["t_start_ns"] == 300 * MS][0]
    assert measured["bounce_us"] == 600.0 and measured["flags"] == 0


def test_windows_measured_together_or_one_at_a_time_agree():
    # measure_windows takes windows that end where the next starts (drive to drive) by one search for
    # their starts; each window measured alone takes the general search: the rows must be the same
    from benchlog.analysis._measure import measure_windows

    rng = np.random.default_rng(4)
    for _ in range(300):
        n = int(rng.integers(0, 30))
        t = np.sort(rng.integers(0, 2000, n)).astype(np.int64)
        before = int(rng.integers(0, 2))
        lv = ((np.arange(n) + 1 + before) % 2).astype(np.uint8)
        k = int(rng.integers(1, 6))
        w_start = np.sort(rng.choice(np.arange(-100, 2100), k, replace=False)).astype(np.int64)
        w_end = np.append(w_start[1:], w_start[-1] + int(rng.integers(1, 500)))
        expected = rng.integers(0, 2, k).astype(np.uint8)
        settle, chatter = int(rng.integers(1, 300)), int(rng.integers(1, 100))
        together = measure_windows(t, lv, before, w_start, w_end, expected, settle, chatter)
        for i in range(k):
            # the level before window i: the last edge before it, else the level before all
            prior = lv[t < w_start[i]]
            level = int(prior[-1]) if len(prior) else before
            inside = (t >= w_start[i]) & (t < w_end[i])
            alone = measure_windows(
                t[inside], lv[inside], level, w_start[i : i + 1], w_end[i : i + 1], expected[i : i + 1],
                settle, chatter,
            )  # fmt: skip
            assert_rows_equal(together[i : i + 1], alone)


def test_unfiltered_edges_are_used_as_they_are():
    from benchlog.analysis._analyzer import _Channel, _kept

    ch = _Channel(0, False, t=np.array([5, 9, 20], np.int64), lv=np.array([1, 0, 1], np.uint8))
    t, lv = _kept(ch, np.arange(3))
    assert t is ch.t and lv is ch.lv  # nothing removed: no copy
    t, lv = _kept(ch, np.array([0, 2]))
    assert t.tolist() == [5, 20] and lv.tolist() == [1, 1]
