"""A recording replayed in large batches (`Timeline.replay`) is placed exactly as when it is pushed beat
group by beat group (`Timeline.push`), the plain path the batch path must reproduce (see
benchlog/clock/_replay.py): edges, drives, beats, incidents and markers, whatever the read size, across
counter wraps, sampler resets and damaged bytes."""

from __future__ import annotations

import numpy as np
import pytest

from benchlog.clock import Timeline, merge_timed
from benchlog.events import RESET
from benchlog.sim import Bench, load_preset
from benchlog.wire import Beat, Decoder, Go, Plan

S = 1_000_000_000


def recording(cfg, seconds: float, seed: int = 5) -> bytes:
    bench = Bench(cfg, seed)
    recs = bench.advance_to(0)
    for ch in bench.units:
        recs += bench.command(Plan(ch, 20_000, 20_000, 0))
    recs += bench.command(Go())
    data = bytearray(bench.encode(recs))
    t = 0
    while t < seconds * S:
        t += S // 4
        data += bench.encode(bench.advance_to(t))
    return bytes(data)


def by_groups(data: bytes):
    """The reference: records pushed one beat group at a time, the host clock paced per group."""
    dec, tl = Decoder(), Timeline()
    records = dec.feed(data)
    parts, group, host = [], [], 0
    for rec in records:
        group.append(rec)
        if isinstance(rec, Beat):
            host += tl.replay_step()
            parts.append(tl.push(group, host))
            group = []
    if group:
        host += tl.replay_step()
        parts.append(tl.push(group, host))
    return merge_timed(parts)


def replayed(data: bytes, read: int):
    dec, tl = Decoder(), Timeline()
    parts = [tl.replay(dec.feed(data[i : i + read], blocks=True)) for i in range(0, len(data), read)]
    parts.append(tl.replay_end())
    return merge_timed(parts)


def assert_same(a, b) -> None:
    for what in ("edges", "drives"):
        for f in ("t_ns", "channel", "level"):
            assert np.array_equal(getattr(getattr(a, what), f), getattr(getattr(b, what), f)), (what, f)
    assert np.array_equal(a.drives.cycle, b.drives.cycle)
    for f in ("t_ns", "host_ns", "captured", "dropped"):
        assert np.array_equal(getattr(a.beats, f), getattr(b.beats, f)), f
    assert a.incidents == b.incidents
    assert (a.counts, a.notices, a.pongs, a.accepted) == (b.counts, b.notices, b.pongs, b.accepted)


CASES = {
    "v2 line": (load_preset("demo"), 3.0),
    "v2 packed": (load_preset("demo").with_sampler(form="packed"), 3.0),
    "16-bit counter": (load_preset("wrap16"), 2.0),
    "reset, packed": (load_preset("demo").with_sampler(form="packed").with_faults(reset_at_cycle=20), 3.0),
    "flipped bits": (load_preset("demo").with_sampler(form="packed").with_faults(flip_rate=2e-4), 3.0),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_replay_in_batches_places_records_as_beat_groups_do(case):
    cfg, seconds = CASES[case]
    data = recording(cfg, seconds)
    want = by_groups(data)
    assert len(want.edges) > 1000 and len(want.beats) >= 4
    for read in (len(data), 65_537, 4_099):
        assert_same(want, replayed(data, read))
    if "reset" in case:
        assert any(i.kind == RESET for i in want.incidents)


def test_a_garbage_tick_far_beyond_any_run_is_placed_as_beat_groups_place_it():
    # a 64-bit counter reading 2**62 ticks at 1 MHz (146,000 years): the batch path's float check for
    # ticks beyond any run length runs (it is skipped only where no tick can get that far)
    from benchlog.wire import Announce, Edges, LineEncoder

    enc = LineEncoder(8, 64)
    records = [Announce(1, 1_000_000, 64, 2, "GARBAGE-64")]
    tick = 0
    for k in range(40):
        ticks = tick + np.arange(1, 11) * 1000
        if k == 25:
            ticks[4] = 1 << 62
        records.append(
            Edges(np.zeros(10, np.uint8), (np.arange(10) % 2).astype(np.uint8), ticks.astype(np.uint64))
        )
        tick += 10_000
        records.append(Beat(tick, 10 * (k + 1), 0))
    data = b"".join(enc.encode(r) for r in records)
    want = by_groups(data)
    assert any(i.kind == RESET for i in want.incidents)  # the garbage tick starts an epoch
    for read in (len(data), 997):
        assert_same(want, replayed(data, read))


def test_the_float_check_is_skipped_only_where_no_tick_can_reach_the_limit():
    from fractions import Fraction

    from benchlog.clock._replay import within_epoch_limit
    from benchlog.clock._timeline import EPOCH_LIMIT_NS

    rng = np.random.default_rng(2)
    for _ in range(2000):
        bits = int(rng.choice([16, 24, 32, 48, 64]))
        hz = int(rng.integers(1, 2**32))
        n = int(rng.integers(1, 1 << 22))
        last = int(rng.integers(-(2**40), 2**40))
        # the farthest n deltas of at most half a wrap each can reach, in exact rational ns
        far = Fraction((abs(last) + n * 2 ** (bits - 1)) * 10**9, hz)
        assert within_epoch_limit(last, n, bits, hz) == (far.__floor__() <= EPOCH_LIMIT_NS // 2)
    # a day of a 32-bit, 1 MHz counter and a 1 MiB read's rows: skipped; any 64-bit counter: not
    assert within_epoch_limit(86_400 * 10**6, 150_000, 32, 1_000_000)
    assert not within_epoch_limit(0, 1, 64, 1_000_000)
