"""The simulated sampler speaks protocol version 2: it keeps the cycle count, and its truth says how many
cycles each unit really did (docs/protocol.md, version 2)."""

from __future__ import annotations

from test_sim_sampler import cfg, cycle

from benchlog.sim import Bench
from benchlog.wire import (
    Announce,
    Beat,
    Decoder,
    Drive,
    Fault,
    Go,
    GoAccepted,
    Halt,
    Plan,
    PlanAccepted,
    SetForm,
)


def test_plan_and_go_are_acknowledged_with_what_was_accepted():
    bench = Bench(cfg(), seed=1)
    bench.advance_to(0)
    assert bench.command(Plan(1, 10_000, 20_000, 7)) == [PlanAccepted(1, 10_000, 20_000, 7)]
    (go,) = bench.command(Go())
    assert isinstance(go, GoAccepted) and go.channels == (1,)
    assert bench.command(Go()) == [GoAccepted((), bench._tick(bench.now_ns + 100_000))]


def test_drives_and_beats_carry_the_samplers_count_and_truth_agrees():
    bench = Bench(cfg(), seed=2)
    recs = cycle(bench, 1.05, cycles=40)  # 40 cycles of 20 ms from GO at 0.1 ms: done at 0.8 s
    recs += bench.advance_to(bench.now_ns + 600_000_000)  # a beat after the last cycle
    assert recs[0].version == 2
    for ch in (0, 1):
        drives = [r for r in recs if isinstance(r, Drive) and r.channel == ch]
        assert [d.cycle for d in drives] == [i // 2 + 1 for i in range(80)]
        assert [d.level for d in drives] == [1, 0] * 40
    last = [r for r in recs if isinstance(r, Beat)][-1]
    assert last.cycles == ((0, 40), (1, 40)) and last.short == 0
    assert bench.truth.cycles == {0: 40, 1: 40}
    # counts in beats grow monotonically and never run ahead of the drive-offs sent before them
    offs = {0: 0, 1: 0}
    for r in recs:
        if isinstance(r, Drive) and r.level == 0:
            offs[r.channel] = r.cycle
        elif isinstance(r, Beat) and r.cycles:
            assert dict(r.cycles) == offs


def test_after_a_reset_the_count_restarts_and_the_truth_runs_on():
    bench = Bench(cfg(faults="[faults]\nreset_at_cycle = 20\n"), seed=4)
    recs = cycle(bench, 1.0)
    ann = [i for i, r in enumerate(recs) if isinstance(r, Announce)]
    after = recs[ann[1] :]
    first_beat = next(r for r in after if isinstance(r, Beat))
    assert dict(first_beat.cycles) == {0: 0, 1: 0}
    before_off = [r.cycle for r in recs[: ann[1]] if isinstance(r, Drive) and r.level == 0 and r.channel == 0]
    after_off = [r.cycle for r in after if isinstance(r, Drive) and r.level == 0 and r.channel == 0]
    assert after_off[0] == 1
    assert before_off[-1] + after_off[-1] == bench.truth.cycles[0]


def test_a_halted_plan_counts_what_it_completed():
    bench = Bench(cfg(), seed=6)
    recs = cycle(bench, 0.205)
    recs += bench.command(Halt())
    recs += bench.advance_to(bench.now_ns + 1_100_000_000)
    last = [r for r in recs if isinstance(r, Beat)][-1]
    # the 11th cycle began at 200.1 ms: HALT lets it finish
    assert dict(last.cycles) == bench.truth.cycles == {0: 11, 1: 11}


def test_the_packed_form_starts_with_a_delimiter_after_reset():
    bench = Bench(cfg().with_sampler(form="packed"), seed=3)
    data = bench.encode(bench.advance_to(0))
    assert data[:1] == b"\0" and b"\0" not in data[1:2]
    assert bench.encode(bench.advance_to(2_000_000_000))[:1] != b"\0"
    out = Decoder().feed(b"\x13garbage" + data)
    assert isinstance(out[0], Fault) and out[0].nbytes == 9  # the garbage and the 0x00 that ends it
    assert out[1] == bench.announcement()
    line = Bench(cfg(), seed=3)
    line.advance_to(0)
    line.command(SetForm("P"))
    assert line.encode(line.advance_to(1_000_000_000))[:1] == b"\0"
