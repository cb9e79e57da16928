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
