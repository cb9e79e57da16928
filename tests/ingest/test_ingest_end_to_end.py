"""End to end through a real pseudo-terminal: simulated sampler -> pty -> pyserial -> decoder -> clock.

One run crosses counter wraps, a sampler reset, a stretch of byte damage and a pulled cable. Every edge
that arrives must be one the simulator sent (its ground truth), at the right sampler time, and every
edge that did not arrive must be reported lost by an incident with its count. The parameters below are
test inputs, not demo data.
"""

from __future__ import annotations

import time

import numpy as np
import pytest

from benchlog.events import CLOCK, DECODE_FAULT, DISCONNECT, RESET
from benchlog.ingest import Feed, merge_timed
from benchlog.sim import PtySampler, parse_config
from benchlog.wire import Plan
from tests.conftest import HANG_S

CONFIG = """
[sampler]
board_id = "E2E-{form}"
clock_hz = {clock_hz}
counter_bits = {bits}
ppm = 50.0
channels = 4
form = "{form}"

[populations.P]
supplier = "test"
operate = {{ median_us = 3000.0, sigma = 0.1 }}
release = {{ median_us = 2000.0, sigma = 0.1 }}
make = {{ count_mean = 4.0, first_gap_us = 150.0, dwell_us = 90.0 }}
break = {{ count_mean = 2.0, first_gap_us = 300.0, dwell_us = 120.0 }}
life_shape = 2.0
life_scale = 1.0e9
failure = {{ chatter = 1.0 }}

[[units]]
channel = 0
population = "P"
serial = "E0"

[[units]]
channel = 1
population = "P"
serial = "E1"

[[units]]
channel = 2
population = "P"
serial = "E2"

[[units]]
channel = 3
population = "P"
serial = "E3"

[faults]
{faults}
"""

SPEED = 20.0


def run_bench(cfg, seconds_sampler: float, plan_cycles: int, seed: int = 7, speed: float = SPEED, until=None):
    """Serve `cfg` on a pty, read it with a Feed, cycle all four units; returns (sim, feed, timed).

    `until(parts)`, if given, must also hold before the reading stops (and then 2 s more of sampler time
    are read): an event the test waits for, such as the host hearing the board again after a pull."""
    parts = []
    with PtySampler(cfg, seed=seed, speed=speed) as sim:
        with Feed(sim.path, speed=speed, wait_s=2.0, backoff_s=(0.01, 0.1)) as feed:
            feed.start_cycling([Plan(ch, 50_000, 50_000, plan_cycles) for ch in range(4)])
            ceiling = time.monotonic() + HANG_S
            while sim.bench.now_ns < seconds_sampler * 1e9:
                parts.append(feed.poll(0.05))
                assert sim.error is None
                assert time.monotonic() < ceiling, "the simulated bench stopped advancing"
            if until is not None:
                while not until(parts):
                    parts.append(feed.poll(0.05))
                    assert sim.error is None
                    assert time.monotonic() < ceiling, "the awaited event never came"
                settled = sim.bench.now_ns + 2e9
                while sim.bench.now_ns < settled:
                    parts.append(feed.poll(0.05))
                    assert time.monotonic() < ceiling, "the simulated bench stopped advancing"
            # the plan is done by now: read on until every edge sent is received or reported lost (a
            # loaded machine may be slow to read the last of it; only a hang reaches the ceiling)
            while feed.counters.edges + feed.counters.edges_lost < len(sim.bench.truth.sent):
                parts.append(feed.poll(0.05))
                if time.monotonic() > ceiling:
                    break  # the test's own assertions say what is missing
            parts.append(feed.poll(0.05))
        counters = feed.counters
    return sim, counters, merge_timed(parts)


def match_session(rx_t, rx_ch, rx_lv, truth, clock_hz, anchor: int) -> np.ndarray:
    """Whether each received edge is an edge of one sent session (same channel and level, same sampler
    time within 1 us) after that session's constant run-time offset. The offset is the one that makes
    the most of 50 received edges from `anchor` on match, tried against every sent edge of the anchor's
    channel and level."""
    tr_t = (truth["tick"] * (10**9 // clock_hz)).astype(np.int64)
    key_tr = truth["channel"].astype(np.int64) * 2 + truth["level"]
    key_rx = rx_ch.astype(np.int64) * 2 + rx_lv
    combined = np.sort(key_tr * (1 << 50) + tr_t)

    def hits(offset: int, sel=slice(None)) -> np.ndarray:
        want = key_rx[sel] * (1 << 50) + (rx_t[sel] - offset)
        pos = np.searchsorted(combined, want)
        lo = np.clip(pos - 1, 0, len(combined) - 1)
        hi = np.clip(pos, 0, len(combined) - 1)
        return (np.abs(combined[lo] - want) <= 1000) | (np.abs(combined[hi] - want) <= 1000)

    window = slice(anchor, anchor + 50)
    same = np.flatnonzero(key_tr == key_rx[anchor])
    best = max((int(rx_t[anchor] - tr_t[i]) for i in same), key=lambda off: hits(off, window).sum())
    return hits(best)


@pytest.mark.parametrize("form", ["line", "packed"])
def test_wrap_reset_damage_and_pulled_cable_are_all_accounted_for(form):
    faults = "\n".join(
        [
            "flip_rate = 0.0003",
            "drop_rate = 0.0003",
            "damage_from_s = 8.0",
            "damage_until_s = 16.0",
            "reset_at_cycle = 250",  # at 25 s of sampler time
            "pull_at_s = 34.0",
            "pull_for_s = 0.12",  # wall seconds: 2.4 s of sampler time at x20
        ]
    )
    cfg = parse_config(CONFIG.format(form=form, bits=24, clock_hz=1_000_000, faults=faults), "e2e.toml")
    sim, counters, timed = run_bench(cfg, seconds_sampler=50.0, plan_cycles=420)
    sent = sim.bench.truth.sent
    assert len(sim.bench.truth.resets) == 1 and len(sim.outages) == 1
    assert sim.bench.truth.lost_in_reset == 0  # the reset falls in an idle stretch

    # the run crossed counter wraps: a 24-bit counter at 1 MHz wraps every 16.8 s
    assert sent["tick"][sent["session"] == 0].max() > 1 << 24
    kinds = [i.kind for i in timed.incidents]
    assert kinds.count(RESET) == 1 and kinds.count(DISCONNECT) == 1
    assert DECODE_FAULT in kinds

    # every loss is reported, with its count: sent = received + reported lost, exactly
    received = len(timed.edges)
    reported_lost = sum(i.edges_lost or 0 for i in timed.incidents)
    assert received + reported_lost == len(sent)
    assert reported_lost > 0 and counters.edges_lost == reported_lost
    assert received == counters.edges

    # every edge that arrived is a sent edge at its sampler time; each sampler session has its own
    # offset (the reset is bridged with host time), anchored well inside the session
    reset = next(i for i in timed.incidents if i.kind == RESET)
    e = timed.edges
    ok = np.zeros(received, bool)
    for session, anchor_t in ((0, reset.t_start_ns - 5e9), (1, reset.t_end_ns + 5e9)):
        anchor = int(np.searchsorted(e.t_ns, anchor_t))
        truth = sent[sent["session"] == session]
        ok |= match_session(e.t_ns, e.channel, e.level, truth, 1_000_000, anchor)
    assert ok.all(), f"{np.count_nonzero(~ok)} received edges are not in the truth"
    for ch in range(4):
        assert np.all(np.diff(e.t_ns[e.channel == ch]) >= 0)  # run time monotonic per channel


def test_sixteen_bit_counter_many_wraps_exact_times():
    """A 16-bit counter at 100 kHz wraps every 0.66 s; with no faults every edge arrives at its tick.

    (At x4 the host's few milliseconds of scheduling jitter stay far below a quarter wrap, which the
    clock needs when it bridges a silence with host time; see docs/simulator.md on speed.)"""
    cfg = parse_config(CONFIG.format(form="packed", bits=16, clock_hz=100_000, faults=""), "wrap.toml")
    sim, counters, timed = run_bench(cfg, seconds_sampler=12.0, plan_cycles=100, seed=3, speed=4.0)
    sent = sim.bench.truth.sent
    e = timed.edges
    assert sent["tick"].max() > 15 * (1 << 16)
    assert len(e) == len(sent) and counters.edges_lost == 0
    # run time is ticks since the first record: edges keep their exact spacing across every wrap
    rx = e.t_ns - e.t_ns[0]
    tr = (sent["tick"] - sent["tick"][0]) * 10_000
    assert np.array_equal(e.channel, sent["channel"]) and np.array_equal(e.level, sent["level"])
    assert np.max(np.abs(rx - tr)) <= 1


def test_bus_powered_board_comes_back_reset_and_idle():
    """A board powered by its cable: while out it is off; back, it announces itself afresh (a reset to
    the clock) and has forgotten its plans, so cycling stops until the host plans again."""
    faults = "pull_at_s = 6.0\npull_for_s = 0.15\npull_powers_off = true"
    cfg = parse_config(CONFIG.format(form="line", bits=32, clock_hz=1_000_000, faults=faults), "bus.toml")
    # the host takes a moment to reopen the port: wait for it to hear the board again (on a loaded
    # machine that can be after the sampler's 14 s)
    heard_again = lambda parts: any(i.kind == RESET for p in parts for i in p.incidents)  # noqa: E731
    sim, counters, timed = run_bench(cfg, seconds_sampler=14.0, plan_cycles=0, seed=5, until=heard_again)
    kinds = [i.kind for i in timed.incidents]
    assert kinds.count(DISCONNECT) == 1 and kinds.count(RESET) == 1
    reset = next(i for i in timed.incidents if i.kind == RESET)
    assert len(timed.announcements) >= 2
    assert np.count_nonzero(timed.edges.t_ns > reset.t_end_ns) == 0  # idle after the power loss
    assert np.count_nonzero(timed.edges.t_ns < reset.t_start_ns) > 1000
    assert len(sim.bench.truth.resets) == 1 and not sim.bench.pending_cycles()
    # the board was off for as long as the cable was out, not for however far the simulation lagged
    (out,) = sim.outages
    assert sim.bench.truth.resets[0] - 6e9 <= ((out[1] - out[0]) * SPEED + 0.5) * 1e9


def test_a_sampler_that_holds_its_output_through_a_pulled_cable_loses_no_time():
    """A pulled cable while the sampler holds what it sends (its buffer outlasts the outage): the frames
    after it continue the sampler's sequence, so nothing was lost and no counter wrap can have passed
    unseen. Every edge keeps its exact sampler time across the outage: no wraps counted from host time
    (at x300 a 24-bit wrap is 56 ms of host time, within a loaded machine's jitter), no false reset.
    Truth: the simulator's sent edges and their ticks."""
    cfg = parse_config(CONFIG.format(form="packed", bits=24, clock_hz=1_000_000, faults=""), "hold.toml")
    speed = 300.0
    parts = []
    with PtySampler(cfg, seed=4, speed=speed) as sim:
        with Feed(sim.path, speed=speed, wait_s=2.0, backoff_s=(0.01, 0.1)) as feed:
            feed.start_cycling([Plan(ch, 50_000, 50_000, 1200) for ch in range(4)])
            ceiling = time.monotonic() + HANG_S
            pulled = False
            while sim.bench.now_ns < 150e9 or not pulled:
                parts.append(feed.poll(0.05))
                assert sim.error is None and time.monotonic() < ceiling, "the simulated bench stopped"
                if not pulled and sim.bench.now_ns > 40e9:  # pulled for many 24-bit wraps of sampler time
                    sim.pull_cable(0.4, hold=True)
                    pulled = True
            while feed.counters.edges + feed.counters.edges_lost < len(sim.bench.truth.sent):
                parts.append(feed.poll(0.05))
                if time.monotonic() > ceiling:
                    break
            parts.append(feed.poll(0.05))
    timed = merge_timed(parts)
    sent = sim.bench.truth.sent
    assert len(sim.outages) == 1 and sent["tick"].max() > 6 * (1 << 24)
    said = [(i.kind, i.detail) for i in timed.incidents]
    kinds = [i.kind for i in timed.incidents]
    assert CLOCK not in kinds and RESET not in kinds, said  # no wraps guessed, no false restart
    (pull,) = [i for i in timed.incidents if i.kind == DISCONNECT]
    # anything lost went before the host had opened the port (a sampler keeps only its last moments
    # then, and how many frames that is depends on the host's start): none at or after the pull
    assert all(i.t_end_ns < pull.t_start_ns for i in timed.incidents if i.kind != DISCONNECT), said
    e = timed.edges
    assert len(e) + sum(i.edges_lost or 0 for i in timed.incidents) == len(sent)
    # every edge received sits at its sent tick, on one offset (nothing is lost after the start, so the
    # latest edge received is the latest one sent)
    offset = int(e.t_ns.max()) - int(sent["tick"].max()) * 1000
    sent_ns = (sent["tick"] * 1000).tolist()
    truth = set(zip(sent["channel"].tolist(), sent["level"].tolist(), sent_ns, strict=True))
    got = zip(e.channel.tolist(), e.level.tolist(), (e.t_ns - offset).tolist(), strict=True)
    assert all(x in truth for x in got)


def test_a_pull_set_for_a_cycle_comes_at_that_cycle_however_late_the_host_reads():
    """The demo pulls a cable a third of the way into a run that lasts a tenth of a second of wall time:
    a host slowed by a loaded machine must not be able to step past that point. The sampler pulls at
    the cycle itself.
    Truth: the simulator's own cycle count."""
    cfg = parse_config(CONFIG.format(form="packed", bits=32, clock_hz=1_000_000, faults=""), "late.toml")
    speed = 300.0
    with PtySampler(cfg, seed=2, speed=speed) as sim:
        sim.pull_cable(0.2, hold=True, at_cycle=30)
        with Feed(sim.path, speed=speed, wait_s=2.0, backoff_s=(0.01, 0.1)) as feed:
            feed.start_cycling([Plan(ch, 50_000, 50_000, 200) for ch in range(4)])
            ceiling = time.monotonic() + HANG_S
            while not sim.outages:
                feed.poll(0.05)
                assert sim.error is None and time.monotonic() < ceiling, "the cable was never pulled"
    # the sampler advances at most one step (5 ms of wall time: 1.5 s, 15 cycles of 100 ms) at a time
    (at,) = sim.pulled_at_cycles
    assert 30 <= at <= 30 + 15
