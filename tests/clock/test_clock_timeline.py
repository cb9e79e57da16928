"""The Timeline: unwrap at any width, exact ns, resets bridged, lost edges, drift, incidents.

The sampler here is a small model written for the tests: true time advances, the sampler counts at
clock_hz * (1 + ppm), beats come as often as the protocol requires, host receive times add latency.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchlog.clock import Timeline, ticks_to_ns
from benchlog.events import CLOCK, DECODE_FAULT, DISCONNECT, LOST_EDGES, OVERFLOW, RESET, SEQUENCE_GAP
from benchlog.wire import Announce, Beat, Drive, Edges, Fault, Notice, Pong, SequenceGap

S = 10**9


class Sampler:
    def __init__(self, hz: int, bits: int, ppm: float = 0.0, seed: int = 0, board: str = "TEST-1"):
        self.hz, self.bits, self.ppm = hz, bits, ppm
        self.rate = hz * (1 + ppm * 1e-6) / 1e9  # ticks per true ns
        self.rng = np.random.default_rng(seed)
        self.announce = Announce(1, hz, bits, 8, board)
        self.boot_ns = 0  # true time of the last reset
        self.captured = 0

    def ticks(self, true_ns: np.ndarray) -> np.ndarray:
        """Unwrapped ticks since the last reset (int64)."""
        return np.floor((np.asarray(true_ns) - self.boot_ns) * self.rate).astype(np.int64)

    def wrap(self, unwrapped: np.ndarray) -> np.ndarray:
        return (
            (unwrapped.astype(np.uint64)) & np.uint64((1 << self.bits) - 1)
            if self.bits < 64
            else unwrapped.astype(np.uint64)
        )

    def edges(self, true_ns: np.ndarray, channel: int = 0) -> Edges:
        self.captured += len(true_ns)
        n = len(true_ns)
        return Edges(
            np.full(n, channel, np.uint8), (np.arange(n) % 2).astype(np.uint8), self.wrap(self.ticks(true_ns))
        )

    def beat(self, true_ns: int, dropped: int = 0) -> Beat:
        return Beat(int(self.wrap(self.ticks(np.array([true_ns])))[0]), self.captured % 2**32, dropped)


def run_stream(tl, smp, start_s, stop_s, push_every_s, edges_per_push=3, latency_ms=2.0):
    """Push records from true time start_s to stop_s; returns (true edge times, placed t_ns, incidents)."""
    true_all, placed, incidents = [], [], []
    quarter_ns = (1 << (smp.bits - 2)) / smp.hz * 1e9
    beat_every = min(push_every_s * S, quarter_ns * 0.9, S)
    t = start_s * S
    while t < stop_s * S:
        nxt = t + push_every_s * S
        recs = []
        b = t + beat_every
        cursor = t
        while b <= nxt:
            tt = np.sort(smp.rng.integers(int(cursor), int(b), edges_per_push))
            recs.append(smp.edges(tt))
            true_all.append(tt)
            recs.append(smp.beat(int(b)))
            cursor = b
            b += beat_every
        host = int(nxt + smp.rng.exponential(latency_ms * 1e6))
        out = tl.push(recs, host)
        placed.append(out.edges.t_ns)
        incidents += out.incidents
        t = nxt
    return np.concatenate(true_all), np.concatenate(placed), incidents


@pytest.mark.parametrize(
    ("bits", "hz", "seconds"),
    [(16, 1_000_000, 1.0), (24, 1_000_000, 60), (32, 100_000_000, 200), (64, 1_000_000, 30)],
)
def test_unwraps_any_width_exactly(bits, hz, seconds):
    smp = Sampler(hz, bits)
    tl = Timeline()
    tl.push([smp.announce], 0)
    wrap_s = (1 << bits) / hz
    push = min(0.5, wrap_s / 8)
    true, placed, incidents = run_stream(tl, smp, 0, seconds, push, latency_ms=0.01)
    assert incidents == []
    unwrapped = smp.ticks(true)
    expected = np.array([ticks_to_ns(int(u), hz) for u in unwrapped]) - ticks_to_ns(int(unwrapped[0]), hz)
    first = placed[0]
    assert np.array_equal(placed - first, expected - expected[0])
    if bits <= 32:
        assert unwrapped[-1] >> bits >= 3  # crossed the wrap several times


def test_32_bit_1mhz_counter_over_several_wraps():
    # a 32-bit counter at 1 MHz wraps every 2**32 / 1e6 s = 71.6 min; run five hours
    smp = Sampler(1_000_000, 32, seed=4)
    tl = Timeline()
    tl.push([smp.announce], 0)
    true, placed, incidents = run_stream(tl, smp, 0, 5 * 3600, 5, edges_per_push=2)
    assert incidents == []
    unwrapped = smp.ticks(true)
    assert unwrapped[-1] >> 32 == 4
    # run time starts at the first record; at 1 MHz a tick is exactly 1000 ns
    assert np.array_equal(placed, (unwrapped - unwrapped[0]) * 1000)
    assert np.all(np.diff(placed) >= 0)


def _kinds(incidents):
    return [i.kind for i in incidents]


def test_reset_with_announcement_is_bridged_by_host_time():
    smp = Sampler(1_000_000, 32, seed=1)
    tl = Timeline()
    tl.push([smp.announce], 0)
    _, before, inc = run_stream(tl, smp, 0, 20, 1)
    assert inc == []
    last = tl.run_ns
    # the sampler restarts at true 21 s (1 s of silence), counter from 0
    smp.boot_ns = 21 * S
    smp.captured = 0
    out = tl.push([smp.announce, smp.edges(np.array([21 * S + 5_000]))], 21 * S + 1_000_000)
    assert _kinds(out.incidents) == [RESET]
    inc = out.incidents[0]
    assert inc.t_start_ns == last
    t_new = int(out.edges.t_ns[0])
    assert t_new >= last
    # bridged with host time: about 1 s after the last record before the reset
    assert abs((t_new - last) - (21 * S + 1_000_000 - 20 * S)) < 10_000_000
    _, after, inc2 = run_stream(tl, smp, 22, 30, 1)
    assert RESET not in _kinds(inc2)
    assert after[0] > t_new and np.all(np.diff(after) >= 0)
    assert tl.resets == 1


def test_reset_without_announcement_is_seen_as_the_counter_going_back():
    smp = Sampler(1_000_000, 32, seed=2)
    tl = Timeline()
    tl.push([smp.announce], 0)
    run_stream(tl, smp, 0, 100, 1)
    smp.boot_ns = 101 * S
    smp.captured = 0
    out = tl.push([smp.edges(np.array([101 * S + 2_000]))], 101 * S + 3 * 10**6)
    assert _kinds(out.incidents) == [RESET]
    assert "went back" in out.incidents[0].detail
    assert out.edges.t_ns[0] >= tl.run_ns - 1


def test_an_announcement_the_host_asked_for_is_no_reset():
    smp = Sampler(1_000_000, 32, seed=3)
    tl = Timeline()
    tl.push([smp.announce], 0)
    run_stream(tl, smp, 0, 10, 1)
    tl.expect_announcement(10 * S)
    out = tl.push([smp.announce, smp.edges(np.array([10 * S + 500]))], 10 * S + 2 * 10**6)
    assert out.incidents == [] and out.announcements == [smp.announce]
    assert tl.resets == 0


@pytest.mark.parametrize("ppm", [50.0, 5000.0])  # a crystal tens of ppm off; a ceramic resonator 0.5 %
def test_clock_error_is_estimated_from_beats(ppm):
    smp = Sampler(1_000_000, 32, ppm=ppm, seed=9)
    tl = Timeline()
    tl.push([smp.announce], 0)
    assert tl.clock_error_ppm is None
    run_stream(tl, smp, 0, 600, 1, latency_ms=3.0)
    # and a few wild receive times (a stalled USB host), which the robust fit must shrug off
    for k in range(5):
        t = (601 + k) * S
        tl.push([smp.beat(t)], t + 400_000_000)
    est = tl.clock_error_ppm
    assert est is not None
    assert abs(est - ppm) < 1.0  # 3 ms jitter over 10 minutes: well under 1 ppm


def test_too_few_beats_give_no_estimate():
    smp = Sampler(1_000_000, 32)
    tl = Timeline()
    tl.push([smp.announce], 0)
    run_stream(tl, smp, 0, 5, 1)
    assert tl.clock_error_ppm is None


def test_lost_and_dropped_edges_are_reported_from_beats():
    smp = Sampler(1_000_000, 32, seed=5)
    tl = Timeline()
    tl.push([smp.announce], 0)
    kinds = []
    host = 0
    for sec in range(1, 8):
        tt = np.arange(10) * 1_000_000 + (sec - 1) * S + 10_000
        batch = smp.edges(tt)
        if sec == 4:  # 3 edges never reach the host (a lost frame)
            batch = Edges(batch.channel[3:], batch.level[3:], batch.tick[3:])
        dropped = 2 if sec >= 5 else 0  # the sampler's buffer overflowed once, 2 edges
        if sec == 5:
            smp.captured += 2  # captured counts the dropped edges too
        host = sec * S + 1_000_000
        out = tl.push([batch, smp.beat(sec * S, dropped=dropped)], host)
        kinds += [(i.kind, i.edges_lost) for i in out.incidents]
    assert (LOST_EDGES, 3) in kinds
    assert (OVERFLOW, 2) in kinds
    assert len([k for k in kinds if k[0] == LOST_EDGES]) == 1  # reported once, not at every beat


def test_in_flight_edges_are_not_counted_lost():
    # the beat is sent before the last edges of its window are flushed; they arrive after it
    smp = Sampler(1_000_000, 32, seed=6)
    tl = Timeline()
    tl.push([smp.announce], 0)
    incidents = []
    for sec in range(1, 6):
        tt = np.arange(4) * 1000 + sec * S - 5000  # just before the beat
        batch = smp.edges(tt)
        early, late = (
            Edges(batch.channel[:2], batch.level[:2], batch.tick[:2]),
            Edges(batch.channel[2:], batch.level[2:], batch.tick[2:]),
        )
        incidents += tl.push([early, smp.beat(sec * S)], sec * S + 10**6).incidents
        incidents += tl.push([late], sec * S + 2 * 10**6).incidents
    assert incidents == []


def test_gaps_and_faults_become_incidents():
    smp = Sampler(1_000_000, 32)
    tl = Timeline()
    out = tl.push([smp.announce, Fault("CRC", 21), Fault("COBS", 9, 2), SequenceGap(5, 8, 3)], 10)
    kinds = _kinds(out.incidents)
    assert kinds.count(DECODE_FAULT) == 1 and kinds.count(SEQUENCE_GAP) == 1
    fault = next(i for i in out.incidents if i.kind == DECODE_FAULT)
    assert "2 x COBS" in fault.detail and "1 x CRC" in fault.detail
    assert "3 frame(s) lost" in next(i for i in out.incidents if i.kind == SEQUENCE_GAP).detail


def test_disconnect_gets_its_run_time_extent():
    smp = Sampler(1_000_000, 32, seed=7)
    tl = Timeline()
    tl.push([smp.announce], 0)
    run_stream(tl, smp, 0, 10, 1)
    last_host, last_run = 10 * S, tl.run_ns
    inc = tl.note_disconnect(last_host + 100_000_000, last_host + 3_100_000_000)
    assert inc.kind == DISCONNECT
    assert inc.t_end_ns - inc.t_start_ns == 3 * S
    assert inc.t_start_ns >= last_run
    out = tl.push([smp.edges(np.array([13 * S + 200_000_000]))], last_host + 3_300_000_000)
    assert out.incidents == [inc]  # delivered once, with the next push
    assert out.edges.t_ns[0] > inc.t_start_ns


def test_outage_longer_than_a_16_bit_wrap_is_bridged_from_host_time():
    # 16 bits at 10 kHz wrap every 6.55 s; a 20 s outage hides three wraps, counted from host time
    smp = Sampler(10_000, 16, seed=8)
    tl = Timeline()
    tl.push([smp.announce], 0)
    true, _, _ = run_stream(tl, smp, 0, 10, 0.5, latency_ms=0.01)
    tl.note_disconnect(10 * S + 10**6, 29 * S)
    t = 30 * S
    out = tl.push([smp.edges(np.array([t]))], t + 10_000)
    assert _kinds(out.incidents) == [DISCONNECT, CLOCK] and "3 counter wrap(s)" in out.incidents[1].detail
    assert abs(int(out.edges.t_ns[0]) - (t - int(true[0]))) < 200_000  # two ticks of 100 us


def test_records_before_the_announcement_wait_for_it():
    smp = Sampler(1_000_000, 32)
    tl = Timeline()
    e = smp.edges(np.array([5 * S, 5 * S + 1000]))
    out = tl.push([e, Drive(1, 1, 5_000_500), Notice("hello"), Pong(3)], 5 * S)
    assert len(out.edges) == 0
    tl.expect_announcement(5 * S)
    out = tl.push([smp.announce], 5 * S + 10**6)
    assert out.edges.t_ns.tolist() == [0, 1000]
    assert out.drives.t_ns.tolist() == [500_000]
    assert [n.text for n in out.notices] == ["hello"] and out.pongs[0].token == 3
    assert out.incidents == []


def test_beats_and_drives_come_out_timed():
    smp = Sampler(1_000_000, 32)
    tl = Timeline()
    out = tl.push([smp.announce, Drive(2, 1, 100), Beat(1000, 0, 0), Drive(2, 0, 2100)], 123)
    assert out.drives.t_ns.tolist() == [0, 2_000_000]
    assert out.beats.t_ns.tolist() == [900_000]  # run time starts at the first record (tick 100)
    assert out.beats.host_ns.tolist() == [123]


def test_a_backlogged_reader_catching_up_is_no_reset():
    # the reader stalled for 3 s; the port buffered the data, which then arrives in two quick chunks
    smp = Sampler(1_000_000, 32, seed=11)
    tl = Timeline()
    tl.push([smp.announce], 0)
    run_stream(tl, smp, 0, 10, 1, latency_ms=0.5)
    first = [smp.edges(np.array([10 * S + 500_000_000])), smp.beat(11 * S)]
    late = [smp.edges(np.array([11 * S + 500_000_000, 12 * S + 700_000_000])), smp.beat(13 * S)]
    out1 = tl.push(first, 13 * S + 1_000_000)
    out2 = tl.push(late, 13 * S + 2_000_000)
    assert out1.incidents == [] and out2.incidents == []
    assert np.all(
        np.diff(np.concatenate([out1.edges.t_ns, out2.edges.t_ns])) == [1_000_000_000, 1_200_000_000]
    )


def test_a_stall_without_disconnect_adds_no_wraps():
    # 16 bits at 1 MHz wrap every 65.5 ms; a 2 s reader stall with everything buffered loses nothing
    smp = Sampler(1_000_000, 16, seed=12)
    tl = Timeline()
    tl.push([smp.announce], 0)
    true, placed, inc = run_stream(tl, smp, 0, 0.5, 0.01, latency_ms=0.01)
    true2 = []
    recs = []
    for k in range(1, 100):  # 10 ms of records each, all received at once after the stall
        tt = np.array([int(0.5 * S) + k * 10_000_000 - 3_000_000])
        recs += [smp.edges(tt), smp.beat(int(0.5 * S) + k * 10_000_000)]
        true2.append(tt)
    out = tl.push(recs, int(0.5 * S) + 3 * S)
    assert inc == [] and out.incidents == []
    t_true = np.concatenate([true, np.concatenate(true2)]) - true[0]
    t_got = np.concatenate([placed, out.edges.t_ns])
    assert np.max(np.abs(t_got - t_true)) < 2_000  # within a tick or two


def test_a_counter_jumping_ahead_of_the_host_clock_is_a_reset():
    smp = Sampler(1_000_000, 32, seed=13)
    smp.boot_ns = -(0xF0000000 * 1000)  # the counter started near the top of its range
    tl = Timeline()
    tl.push([smp.announce], 0)
    run_stream(tl, smp, 0, 5, 1)
    # restart without an announcement: the new small tick is 268 s "ahead" modulo 2**32, in 1 s of host time
    out = tl.push([Edges.of([(0, 1, 1000)])], 6 * S)
    assert _kinds(out.incidents) == [RESET] and "ahead" in out.incidents[0].detail


record_strategy = st.one_of(
    st.builds(
        lambda rows: Edges.of(rows),
        st.lists(st.tuples(st.integers(0, 15), st.integers(0, 1), st.integers(0, 2**64 - 1)), max_size=20),
    ),
    st.builds(Drive, st.integers(0, 15), st.integers(0, 1), st.integers(0, 2**64 - 1)),
    st.builds(Beat, st.integers(0, 2**64 - 1), st.integers(0, 2**32 - 1), st.integers(0, 2**32 - 1)),
    st.builds(
        Announce,
        st.integers(1, 3),
        st.integers(1, 2**32 - 1),
        st.integers(16, 64),
        st.integers(1, 16),
        st.just("FUZZ"),
    ),
    st.builds(Fault, st.sampled_from(["CRC", "syntax"]), st.integers(0, 500)),
    st.builds(SequenceGap, st.integers(0, 65535), st.integers(0, 65535), st.integers(1, 65535)),
    st.builds(Notice, st.text(max_size=10)),
    st.builds(Pong, st.integers(0, 65535)),
)


@settings(max_examples=150, deadline=None)
@given(st.lists(st.tuples(st.lists(record_strategy, max_size=8), st.integers(0, 10**12)), max_size=10))
def test_timeline_never_raises_on_arbitrary_records(pushes):
    tl = Timeline()
    host = 0
    for records, dt in pushes:
        host += dt
        out = tl.push(records, host)
        assert out.edges.t_ns.dtype == np.int64 and len(out.edges.channel) == len(out.edges)
        if dt % 7 == 0:  # now and then the port drops out
            tl.note_disconnect(host, host + dt // 2)
    tl.clock_error_ppm  # noqa: B018
