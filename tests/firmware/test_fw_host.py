"""The firmware core, built for Linux (firmware_ref/host), against scripted pin changes.

Its output bytes go through benchlog's own decoder and must give back exactly the scripted edges,
in both forms, with the beats, notices and drive records docs/protocol.md promises.
"""

from __future__ import annotations

import random
import subprocess
import zlib
from pathlib import Path

import pytest
from _fw_helpers import decode_all, edge_rows, others, run_host
from cobs import cobs

from benchlog.wire import (
    Announce,
    Beat,
    Drive,
    Edges,
    Fault,
    GoAccepted,
    Notice,
    PlanAccepted,
    Pong,
    SequenceGap,
    cobs_decode,
)
from tests.conftest import HANG_S

FORMS = ["L", "P"]


def bounce_script(seed: int = 7) -> tuple[str, list[tuple[int, int, int]]]:
    """Make and break bursts on three channels: simultaneous edges, gaps over 65535 ticks (a new
    frame), a burst of more than 32 edges inside 5 ms (a size flush) and beats on the way."""
    rng = random.Random(seed)
    rows: list[tuple[int, int, int]] = []
    level = {0: 0, 3: 0, 7: 0}
    t = 1000
    for _ in range(12):
        t += rng.randint(20_000, 90_000)
        for ch in (0, 3):
            level[ch] ^= 1
            rows.append((t, ch, level[ch]))  # two channels in one interrupt
        u = t
        for _ in range(rng.randint(2, 6)):  # bounce on channel 3
            u += rng.randint(15, 900)
            for _ in range(2):
                level[3] ^= 1
                rows.append((u, 3, level[3]))
                u += rng.randint(15, 400)
        t = u
    t += 200_000  # more than 65535 ticks of quiet
    for _ in range(40):  # 40 edges inside 4 ms on channel 7
        t += 100
        level[7] ^= 1
        rows.append((t, 7, level[7]))
    rows.sort()
    lines = [f"{tick} edge {ch} {lv}" for tick, ch, lv in rows]
    lines.append(f"{t + 1_200_000} end")
    return "\n".join(lines) + "\n", [(ch, lv, tick) for tick, ch, lv in rows]


def test_selftest(blhost: Path) -> None:
    result = subprocess.run([str(blhost), "selftest"], capture_output=True, text=True, timeout=HANG_S)
    assert result.returncode == 0, result.stderr
    assert "0 failed" in result.stdout


def test_crc_matches_zlib(blhost: Path) -> None:
    rng = random.Random(3)
    for n in (0, 1, 9, 255, 1024, 4000):
        data = bytes(rng.randrange(256) for _ in range(n))
        out = subprocess.run([str(blhost), "crc"], input=data, capture_output=True, timeout=HANG_S).stdout
        assert int(out, 16) == zlib.crc32(data)  # reference: zlib's CRC-32 (ISO-HDLC)


def test_cobs_matches_the_reference_library(blhost: Path) -> None:
    rng = random.Random(5)
    cases = [b"", b"\x00", b"\x00\x00", bytes(range(1, 255)), bytes(range(1, 256)), bytes(253) + b"\x01"]
    for n in (1, 100, 253, 254, 255, 508, 1000):
        cases.append(bytes(rng.choice([0, 0, rng.randrange(1, 256)]) for _ in range(n)))
        cases.append(bytes(rng.randrange(1, 256) for _ in range(n)))
    for raw in cases:
        out = subprocess.run([str(blhost), "cobs"], input=raw, capture_output=True, timeout=HANG_S).stdout
        assert out == cobs.encode(raw) + b"\x00"  # reference: the `cobs` package (Cheshire and Baker)


@pytest.mark.parametrize("form", FORMS)
def test_scripted_edges_decode_exactly(blhost: Path, tmp_path: Path, form: str) -> None:
    script, want = bounce_script()
    data, _ = run_host(blhost, script, tmp_path, "--form", form)
    assert (b"\x00" in data) == (form == "P")
    records = decode_all(data)
    assert not [r for r in records if isinstance(r, Fault | SequenceGap)]
    assert records[0] == Announce(2, 1_000_000, 32, 8, "blref-host")
    assert edge_rows(records) == want

    # beats: captured covers exactly the edges before each beat; one at least every 0.5 s
    seen = 0
    beats = []
    for r in records:
        if isinstance(r, Edges):
            seen += len(r)
        elif isinstance(r, Beat):
            assert (r.captured, r.dropped, r.short, r.cycles) == (seen, 0, 0, ())
            beats.append(r.tick)
    assert beats[0] == 0 and len(beats) >= 3
    assert max(b - a for a, b in zip(beats, beats[1:], strict=False)) <= 500_000 + 10


def test_packed_frames_follow_the_flush_rules(blhost: Path, tmp_path: Path) -> None:
    script, _ = bounce_script(seed=11)
    data, _ = run_host(blhost, script, tmp_path, "--form", "P")
    assert data[:1] == b"\x00"  # a fresh packed stream starts with one (docs/protocol.md, version 2)
    frames = [cobs_decode(f) for f in data[1:].split(b"\x00")[:-1]]
    seqs = [int.from_bytes(f[1:3], "little") for f in frames]
    assert seqs == list(range(len(frames)))  # +1 per frame, every type counts
    sizes = []
    for f in frames:
        assert int.from_bytes(f[-4:], "little") == zlib.crc32(f[:-4])  # reference: zlib
        if f[0] != 0x01:
            continue
        count = f[11]
        assert len(f) == 16 + 3 * count
        deltas = [int.from_bytes(f[12 + 3 * i + 1 : 12 + 3 * i + 3], "little") for i in range(count)]
        assert deltas[0] == 0  # base_tick is the first edge's tick
        assert sum(deltas) <= 5000 + 10  # flushed within 5 ms (plus one main-loop pass)
        sizes.append(count)
    assert max(sizes) == 32  # the 40-edge burst was cut at 32


def test_16_bit_counter_wraps_and_beats_keep_the_host_in_step(blhost: Path, tmp_path: Path) -> None:
    rng = random.Random(2)
    rows, t, lv = [], 500, 0
    while t < 900_000:
        t += rng.randint(40, 70_000)
        lv ^= 1
        rows.append((t, lv))
    script = "".join(f"{tick} edge 1 {lv}\n" for tick, lv in rows) + "1000000 end\n"
    data, _ = run_host(blhost, script, tmp_path, "--bits", "16", "--form", "P")
    records = decode_all(data)
    assert records[0] == Announce(2, 1_000_000, 16, 8, "blref-host")
    # unwrap every tick-bearing record in stream order, as a host would
    absolute, prev, edges_abs = 0, 0, []
    beat_gaps = []
    last_beat = 0
    for r in records:
        ticks = [int(x) for x in r.tick] if isinstance(r, Edges) else [r.tick] if isinstance(r, Beat) else []
        for tick in ticks:
            step = (tick - prev) % 2**16
            assert step < 2**15, "two records more than half a wrap apart: the host would lose count"
            absolute += step
            prev = tick
            if isinstance(r, Edges):
                edges_abs.append(absolute)
            else:
                beat_gaps.append(absolute - last_beat)
                last_beat = absolute
    assert edges_abs == [tick for tick, _ in rows]
    assert max(beat_gaps) <= 2**14  # a beat at least every quarter wrap (docs/protocol.md)


def test_queue_overflow_is_counted_and_reported(blhost: Path, tmp_path: Path) -> None:
    rows, t = [], 1000
    levels = [0, 0, 0, 0]
    for i in range(400):  # 400 edges in 40 ms through a 9600-baud line: far more than it carries
        t += 100
        ch = i % 4
        levels[ch] ^= 1
        rows.append((ch, levels[ch], t))
    script = "".join(f"{tick} edge {ch} {lv}\n" for ch, lv, tick in rows) + "3000000 end\n"
    data, summary = run_host(blhost, script, tmp_path, "--form", "P", "--baud", "9600")
    records = decode_all(data)
    got = edge_rows(records)
    beat = [r for r in records if isinstance(r, Beat)][-1]
    assert beat.dropped > 0 and beat.captured == len(rows)
    assert len(got) + beat.dropped == beat.captured
    assert set(got) <= set(rows) and got == sorted(got, key=lambda r: r[2])  # sent ones are exact
    notices = [r.text for r in records if isinstance(r, Notice)]
    assert f"capture queue full: {beat.dropped} edges dropped since reset" in notices
    assert f"dropped {beat.dropped}" in summary


def test_a_pulse_shorter_than_a_tick_is_counted(blhost: Path, tmp_path: Path) -> None:
    script = "1000 edge 2 1\n1000 edge 2 0\n5000 edge 2 1\n600000 end\n"
    records = decode_all(run_host(blhost, script, tmp_path)[0])
    assert edge_rows(records) == [(2, 1, 5000)]
    assert Notice("1 pin changes too short to time since reset") in records
    assert [r.short for r in records if isinstance(r, Beat)][-1] == 1  # version 2: beats carry the count


def test_commands(blhost: Path, tmp_path: Path) -> None:
    script = (
        "100 cmd PING 42\n200 cmd WHO\n300 cmd PING 70000\n400 cmd FOO bar*\n"
        f"500 cmd {'X' * 60}\n600 cmd GO\n700 cmd PLAN 9 10 10 1\n800 cmd PING 1\n"
        "900 cmd FORM P\n1000 cmd PING 2\n2000 edge 4 1\n20000 end\n"
    )
    data, _ = run_host(blhost, script, tmp_path)
    fence = data.index(b"P 1*")  # the line form ends with the answer to PING 1
    cut = data.index(b"\n", fence) + 1
    head, tail = decode_all(data[:cut]), decode_all(data[cut:])
    announce = Announce(2, 1_000_000, 32, 8, "blref-host")
    assert others(head) == [
        announce,
        Beat(0, 0, 0, 0, ()),
        Pong(42),
        announce,
        Notice("unknown command: PING 70000"),
        Notice("unknown command: FOO bar?"),  # '*' never appears in a notice
        Notice("command too long: ignored"),
        Notice("GO ignored: no PLAN"),
        Notice("PLAN needs channel on_us off_us cycles: 9"),  # channel 9 of 8
        Pong(1),
    ]
    assert data[cut : cut + 1] == b"\x00"  # FORM P: the packed form starts with a 0x00 (version 2)
    assert tail[0] == Pong(2) and edge_rows(tail) == [(4, 1, 2000)]


def test_cycle_driver_switches_on_schedule(blhost: Path, tmp_path: Path) -> None:
    script = (
        "100 cmd PLAN 2 20000 30000 3\n100 cmd PLAN 5 1000 1500 0\n10000 cmd GO\n"
        "10500 cmd PLAN 1 10 10 1\n10600 cmd GO\n"
        "60000 edge 2 1\n60040 edge 2 0\n60100 edge 2 1\n"
        "120000 cmd HALT\n200000 cmd PLAN 2 20000 30000 1\n200000 cmd GO\n1100000 end\n"
    )
    log = tmp_path / "actuators.log"
    for form in FORMS:
        data, _ = run_host(blhost, script, tmp_path, "--form", form, "--actuator-log", str(log))
        records = decode_all(data)
        drives = [(r.tick, r.channel, r.level) for r in records if isinstance(r, Drive)]
        switched = [tuple(int(x) for x in line.split()) for line in log.read_text().splitlines()]
        assert drives == switched  # every switching has its record, with the tick it happened at
        go = drives[0][0]
        ch2 = [(t - go, lv) for t, ch, lv in drives if ch == 2 and t < 200_000]
        # on 20 ms, off 30 ms, 3 cycles, cut short by HALT 110 ms after GO; 10-tick main-loop passes
        assert [lv for _, lv in ch2] == [1, 0, 1, 0, 1, 0]
        for (t, _), nominal in zip(ch2, [0, 20_000, 50_000, 70_000, 100_000, 110_000], strict=True):
            assert 0 <= t - nominal <= 10
        ch5 = [(t, lv) for t, ch, lv in drives if ch == 5]
        assert ch5[-1][1] == 0 and 117_500 <= ch5[-1][0] <= 120_010  # it stopped at HALT, and off
        texts = [r.text for r in records if isinstance(r, Notice)]
        assert "PLAN refused while cycling, HALT first: 1" in texts
        assert "channel 2 finished its plan: 3 cycles" not in texts  # HALT came first
        assert "channel 2 finished its plan: 1 cycles" in texts
        # version 2: PLAN and GO acknowledged with what the sampler took; a GO while every planned
        # channel cycles starts none (as the simulated sampler answers it)
        plans = [r for r in records if isinstance(r, PlanAccepted)]
        assert plans == [PlanAccepted(2, 20000, 30000, 3), PlanAccepted(5, 1000, 1500, 0)] + [
            PlanAccepted(2, 20000, 30000, 1)
        ]
        goes = [r for r in records if isinstance(r, GoAccepted)]
        assert [g.channels for g in goes] == [(2, 5), (), (2,)]
        assert goes[0].tick == go
        assert goes[2].tick == min(t for t, ch, _ in drives if ch == 2 and t >= 200_000)
        ch2_cycles = [r.cycle for r in records if isinstance(r, Drive) and r.channel == 2]
        assert ch2_cycles == [1, 1, 2, 2, 3, 3, 1, 1]
        # docs/protocol.md: a drive carries its cycle (1 = the first after GO; on and off of one cycle
        # share it), a cycle is completed when the actuator switches off (HALT's switching too), and
        # each beat lists, per channel started since reset, the cycles completed by then
        done: dict[int, int] = {}
        n_beats = 0
        for r in records:
            if isinstance(r, GoAccepted):
                done.update(dict.fromkeys(r.channels, 0))
            elif isinstance(r, Drive):
                done[r.channel] += 0 if r.level else 1
                assert r.cycle == done[r.channel] + r.level, r
            elif isinstance(r, Beat):
                assert dict(r.cycles) == done and [c for c, _ in r.cycles] == sorted(done)
                n_beats += 1
        assert n_beats >= 3 and done[5] == len([1 for _, ch, lv in drives if ch == 5 and not lv])
        # every tick-bearing record leaves in tick order (drives and edges share one queue)
        ticks = []
        for r in records:
            ticks += (
                [int(x) for x in r.tick] if isinstance(r, Edges) else [r.tick] if hasattr(r, "tick") else []
            )
        assert ticks == sorted(ticks)


def test_bad_script_is_one_clear_line(blhost: Path, tmp_path: Path) -> None:
    path = tmp_path / "bad.txt"
    path.write_text("100 edge 0 1\n50 edge 0 0\n")
    result = subprocess.run([str(blhost), "run", str(path)], capture_output=True, text=True, timeout=HANG_S)
    assert result.returncode == 2
    assert result.stderr == "blhost: script line 2: ticks must not decrease\n"
