"""Property tests: metrics do not depend on where the time axis starts or how the stream is chunked."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from benchlog.analysis import AnalysisSettings, Analyzer, measure
from benchlog.events import TimedDrives, TimedEdges

US = 1_000
MS = 1_000_000
SETTINGS = AnalysisSettings(settle_ns=3 * MS, glitch_floor_ns=2 * US, lateness_ns=0)


def assert_rows_equal(got: np.ndarray, want: np.ndarray) -> None:
    assert len(got) == len(want)
    for name in want.dtype.names:
        np.testing.assert_array_equal(got[name], want[name], err_msg=name)


@st.composite
def streams(draw):
    """1-3 channels; channel 2, when present, is free-running. Bounce trains with random gaps."""
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    n_ch = draw(st.integers(1, 3))
    cycles = draw(st.integers(1, 6))
    edges, drives = [], []
    for ch in range(n_ch):
        level = 0
        t = int(rng.integers(0, 5 * MS))
        for _ in range(2 * cycles):
            target = 1 - level
            if ch < 2:
                drives.append((t, ch, target))
            t_edge = t + int(rng.integers(500 * US, 6 * MS))
            if rng.random() < 0.1:  # sometimes the contact does not move
                t += int(rng.integers(10 * MS, 30 * MS))
                continue
            bounces = int(rng.integers(0, 4))
            for _ in range(bounces):
                edges.append((t_edge, ch, target))
                t_edge += int(rng.integers(1, 400 * US))  # 1 ns .. 400 us dwell, some below the floor
                edges.append((t_edge, ch, 1 - target))
                t_edge += int(rng.integers(1, 400 * US))
            edges.append((t_edge, ch, target))
            if rng.random() < 0.3:  # chatter while stable
                c = t_edge + 4 * MS
                edges += [(c, ch, 1 - target), (c + int(rng.integers(1, 50 * US)), ch, target)]
            level = target
            t = t_edge + int(rng.integers(8 * MS, 20 * MS))
    edges.sort()
    drives.sort()
    return TimedEdges.of(edges), TimedDrives.of(drives)


@settings(max_examples=100, deadline=None)
@given(streams(), st.integers(0, 10**15))  # run time is >= 0 (-1 marks "no such edge")
def test_invariant_to_shifting_all_timestamps(stream, offset):
    edges, drives = stream
    base = measure(edges, drives, settings=SETTINGS)
    shifted = measure(
        TimedEdges(edges.t_ns + offset, edges.channel, edges.level),
        TimedDrives(drives.t_ns + offset, drives.channel, drives.level),
        settings=SETTINGS,
    )
    for name in ("t_start_ns", "t_first_ns", "t_settle_ns", "t_end_ns"):
        col = base[name].copy()
        col[col != -1] += offset
        base[name] = col
    assert_rows_equal(shifted, base)


@settings(max_examples=100, deadline=None)
@given(streams(), st.lists(st.integers(0, 400 * MS), max_size=8))
def test_invariant_to_chunking(stream, cuts):
    edges, drives = stream
    whole = measure(edges, drives, settings=SETTINGS)
    bounds = sorted(set(cuts)) + [np.iinfo(np.int64).max]
    an = Analyzer(SETTINGS)
    parts, lo = [], np.iinfo(np.int64).min
    for hi in bounds:
        e = edges.select((edges.t_ns >= lo) & (edges.t_ns < hi))
        dsel = (drives.t_ns >= lo) & (drives.t_ns < hi)
        d = TimedDrives(drives.t_ns[dsel], drives.channel[dsel], drives.level[dsel])
        parts.append(an.push(e, d))
        lo = hi
    parts.append(an.flush(until_ns=int(max(edges.t_ns.max(initial=0), drives.t_ns.max(initial=0))) + 1))
    got = np.concatenate(parts)
    got = got[np.lexsort((got["channel"], got["t_start_ns"]))]
    assert_rows_equal(got, whole)


@settings(max_examples=100, deadline=None)
@given(streams(), st.integers(1, 7))
def test_one_record_at_a_time_with_lateness(stream, step):
    """Edges and drives fed in small pieces, drives running ahead of edges within the lateness."""
    edges, drives = stream
    s = SETTINGS.with_(lateness_ns=500 * MS)
    whole = measure(edges, drives, settings=s)
    an = Analyzer(s)
    parts = [an.push(None, drives)]  # every drive first, the edges after it
    for i in range(0, len(edges), step):
        parts.append(an.push(edges.select(np.arange(len(edges)) // step == i // step)))
    parts.append(an.flush())
    got = np.concatenate(parts)
    got = got[np.lexsort((got["channel"], got["t_start_ns"]))]
    assert_rows_equal(got, whole)


@st.composite
def changeover_streams(draw):
    """One form C switch: channel 0 normally open, channel 1 normally closed, drives on channel 0."""
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    edges, drives = [], []
    t = int(rng.integers(0, 3 * MS))
    for _ in range(draw(st.integers(1, 8))):
        for on in (1, 0):
            drives.append((t, 0, on))
            opening, closing = (1, 0) if on else (0, 1)
            t_open = t + int(rng.integers(1 * MS, 4 * MS))
            edges.append((t_open, opening, 0))
            if rng.random() < 0.5:  # the opening contact bounces once
                edges += [(t_open + 30 * US, opening, 1), (t_open + 80 * US, opening, 0)]
            t_close = t_open + int(rng.integers(-50 * US, 600 * US))  # gap or overlap
            edges += [(t_close, closing, 1), (t_close + int(rng.integers(10 * US, 200 * US)), closing, 0)]
            edges.append((t_close + int(rng.integers(250 * US, 400 * US)), closing, 1))
            t += int(rng.integers(15 * MS, 25 * MS))
    edges.sort()
    return TimedEdges.of(edges), TimedDrives.of(drives)


@settings(max_examples=60, deadline=None)
@given(changeover_streams(), st.lists(st.integers(0, 200 * MS), max_size=6))
def test_form_c_transfer_invariant_to_chunking(stream, cuts):
    edges, drives = stream
    s = SETTINGS.with_(form_c=((0, 1),))
    whole = measure(edges, drives, settings=s)
    complete = (whole["flags"] & 1) == 0
    assert np.isfinite(whole["transfer_us"][complete]).all()  # every complete transfer is paired
    an = Analyzer(s)
    parts, lo = [], np.iinfo(np.int64).min
    for hi in sorted(set(cuts)) + [np.iinfo(np.int64).max]:
        dsel = (drives.t_ns >= lo) & (drives.t_ns < hi)
        parts.append(
            an.push(
                edges.select((edges.t_ns >= lo) & (edges.t_ns < hi)),
                TimedDrives(drives.t_ns[dsel], drives.channel[dsel], drives.level[dsel]),
            )
        )
        lo = hi
    parts.append(an.flush(until_ns=int(edges.t_ns.max()) + 1))
    got = np.concatenate(parts)
    assert_rows_equal(got[np.lexsort((got["channel"], got["t_start_ns"]))], whole)
