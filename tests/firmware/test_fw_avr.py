"""The AVR build: it fits the part, and run in the emulator it times a scripted bounce correctly.

The emulator test is the closest the suite comes to a bench: the real firmware image, its UART on a
real pseudo-terminal read with pyserial, and benchlog's decoder.
"""

from __future__ import annotations

import re
import subprocess
import threading
from pathlib import Path

import numpy as np
import pytest
import serial
from _fw_helpers import decode_all, edge_rows, others

from benchlog.analysis import AnalysisSettings
from benchlog.events import CYCLES_NOT_OBSERVED, RESET
from benchlog.ingest import Feed
from benchlog.recorder import Recorder
from benchlog.store import END_TARGET, Store
from benchlog.wire import (
    Announce,
    Beat,
    Drive,
    Fault,
    GoAccepted,
    Notice,
    PlanAccepted,
    Pong,
    SequenceGap,
)
from tests.conftest import HANG_S

FLASH = 32 * 1024  # ATmega328P: 32 KiB flash, 2 KiB SRAM (the part's datasheet, from memory)
SRAM = 2 * 1024
BOOTLOADER = 2 * 1024  # the largest boot section the part can reserve; leave it free
STACK = 320  # stack we keep free of static data; the emulator measures the real depth below

TICK_NS = 500  # Timer1 at 16 MHz / 8 (firmware_ref/README.md)
# Documented accuracy (firmware_ref/README.md, "Timing") of an edge not crowded by another within
# 4 us: one tick of quantisation plus the longest stretch with interrupts off (the cycle driver's
# switching section, or another edge's capture stub).
ISOLATED_TOLERANCE_NS = 6_000
# A drive record's tick against its pin switching (README, "Timing"): the main loop reads the
# counter right after the pin, but the first-edge alignment carries that edge's own latency.
DRIVE_TOLERANCE_NS = 12_000


def test_avr_build_fits_flash_and_ram(avr_elf: Path) -> None:
    report = subprocess.run(["avr-size", "-A", str(avr_elf)], capture_output=True, text=True, check=True)
    sizes = {m[1]: int(m[2]) for m in re.finditer(r"^(\.\w+)\s+(\d+)", report.stdout, re.M)}
    flash = sizes[".text"] + sizes.get(".data", 0)
    ram = sizes.get(".data", 0) + sizes.get(".bss", 0)
    print(f"\nAVR build: flash {flash} of {FLASH} bytes, static RAM {ram} of {SRAM} bytes")
    assert flash <= FLASH - BOOTLOADER
    assert ram <= SRAM - STACK


# A make with bounce and a break with bounce on channel 0 (PORTD) and channel 6 (PORTB), six
# actuations each; gaps from 20 us to 900 us. Times in emulated ns since reset.
def bounce_pattern() -> tuple[list[tuple[int, int, int]], list[list[tuple[int, int]]]]:
    rows, bursts = [], []
    gaps_make = [40_000, 25_000, 180_000, 60_000, 900_000]
    gaps_break = [20_000, 300_000, 75_000]
    t = 20_000_000
    for n in range(6):
        for ch in (0, 6):
            for level, gaps in ((1, gaps_make), (0, gaps_break)):
                burst, u, lv = [], t, level
                for g in [0, *gaps[: 3 + n % 3 if level else 1 + n % 3]]:
                    u += g
                    burst.append((u, lv))
                    rows.append((u, ch, lv))
                    lv ^= 1
                if lv == level:  # end on the new level
                    u += 50_000
                    burst.append((u, level))
                    rows.append((u, ch, level))
                bursts.append([(ch, level), *burst])
                t = u + 4_000_000
    rows.sort()
    rows = [(t + 20_000_000, ch, lv) for t, ch, lv in rows]  # leave the host 40 ms to send its commands
    bursts = [[b[0], *((t + 20_000_000, lv) for t, lv in b[1:])] for b in bursts]
    return rows, bursts


def run_on_pty(
    blsim: Path, avr_elf: Path, script: str, tmp_path: Path, *flags: str
) -> tuple[bytes, str, int]:
    """Start the harness with its UART on a pty, read it with pyserial, send `PING 9` through it."""
    path = tmp_path / "bounce.txt"
    path.write_text(script)
    log = tmp_path / "actuators.log"
    proc, pty = _on_pty(blsim, avr_elf, path, "--actuator-log", str(log), *flags)
    try:
        port = serial.serial_for_url(pty, baudrate=500_000, timeout=0.2)
        proc.stdin.write("go\n")
        proc.stdin.flush()
        # the announcement; in the packed form after the 0x00 a fresh packed stream starts with
        data = bytearray(port.read_until(b"\x00" if flags else b"\n"))
        if flags:
            data += port.read_until(b"\x00")
        # an unknown command too: a notice's path is the core's deepest use of the stack
        port.write(b"PING 9\nPLAN 2 3000 2000 4\nGO\nWHAT\n")
        # read while the emulation runs, so a full terminal buffer can never stall the harness
        stop = threading.Event()

        def read() -> None:  # until the run is over and the terminal has been drained
            while (chunk := port.read(4096)) or not stop.is_set():
                data.extend(chunk)

        reader = threading.Thread(target=read, daemon=True)
        reader.start()
        done = proc.stdout.readline()
        assert done.startswith("done"), done + proc.stderr.read()
        stop.set()
        reader.join(timeout=HANG_S)
        port.close()
    finally:
        _end(proc)
    return bytes(data), log.read_text(), int(done.split()[4])  # deepest stack the harness saw


def _end(proc) -> None:
    """End the harness (its input closed) and close its pipes; it never outlives the test."""
    proc.stdin.close()
    try:
        proc.wait(timeout=HANG_S)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        proc.stdout.close()
        proc.stderr.close()


@pytest.mark.parametrize("strap", ["line", "packed"])
def test_emulated_board_times_a_scripted_bounce(
    blsim: Path, avr_elf: Path, tmp_path: Path, strap: str
) -> None:
    rows, bursts = bounce_pattern()
    end = max(rows[-1][0] + 30_000_000, 560_000_000)  # past the beat due 0.5 s after boot
    script = "".join(f"{t} edge {ch} {lv}\n" for t, ch, lv in rows) + f"{end} end\n"
    flags = ("--packed-strap",) if strap == "packed" else ()
    data, actuator_log, stack_bytes = run_on_pty(blsim, avr_elf, script, tmp_path, *flags)
    assert (b"\x00" in data) == (strap == "packed")
    assert stack_bytes <= STACK - 64  # the static-RAM budget leaves room for what was used
    records = decode_all(data)
    assert not [r for r in records if isinstance(r, Fault | SequenceGap)]
    assert records[0] == Announce(2, 2_000_000, 32, 8, "blref-avr8")
    if strap == "packed":
        assert data[:1] == b"\x00"  # docs/protocol.md: a 0x00 before a version 2 sampler's first frame
    assert Pong(9) in records  # the host-to-board path through the pty works too
    got = edge_rows(records)
    assert [(ch, lv) for ch, lv, _ in got] == [(ch, lv) for _, ch, lv in rows]  # every edge, none extra

    # the counter starts some microseconds after reset: align on the first edge
    offset = got[0][2] * TICK_NS - rows[0][0]
    errors = [tick * TICK_NS - offset - t for (_, _, tick), (t, _, _) in zip(got, rows, strict=True)]
    print(f"\n{strap} form: timestamp error {min(errors)} to {max(errors)} ns, stack at most {stack_bytes} B")
    assert max(map(abs, errors)) <= ISOLATED_TOLERANCE_NS

    # bounce time of each actuation (first to last edge of its burst) against the script
    by_channel: dict[int, list[int]] = {0: [], 6: []}
    for ch, _, tick in got:
        by_channel[ch].append(tick)
    for ch in by_channel:
        ticks = iter(by_channel[ch])
        for burst in (b for b in bursts if b[0][0] == ch):
            measured = [next(ticks) for _ in burst[1:]]
            script_ns = burst[-1][0] - burst[1][0]
            assert abs((measured[-1] - measured[0]) * TICK_NS - script_ns) <= ISOLATED_TOLERANCE_NS

    beats = [r for r in records if isinstance(r, Beat)]
    assert beats[-1].captured == len(rows) and beats[-1].dropped == 0
    assert [r for r in records if isinstance(r, Notice)] == [
        Notice("unknown command: WHAT"),
        Notice("channel 2 finished its plan: 4 cycles"),
    ]

    # the cycle driver on the emulated board: PLAN 2 3000 2000 4 -> four 3 ms pulses, 5 ms apart
    drives = [r for r in records if isinstance(r, Drive)]
    assert [(d.channel, d.level) for d in drives] == [(2, 1), (2, 0)] * 4
    assert [d.cycle for d in drives] == [1, 1, 2, 2, 3, 3, 4, 4]  # on and off of one cycle share its number
    assert PlanAccepted(2, 3000, 2000, 4) in records
    assert [r for r in records if isinstance(r, GoAccepted)] == [GoAccepted((2,), drives[0].tick)]
    assert beats[-1].cycles == ((2, 4),)
    switched = [tuple(int(x) for x in line.split()) for line in actuator_log.splitlines()]
    assert [(ch, lv) for _, ch, lv in switched] == [(2, 1), (2, 0)] * 4
    for d, (ns, _, _) in zip(drives, switched, strict=True):
        assert abs(d.tick * TICK_NS - offset - ns) <= DRIVE_TOLERANCE_NS  # record = pin, in time
    widths = [(b.tick - a.tick) * TICK_NS for a, b in zip(drives[::2], drives[1::2], strict=True)]
    pins = [b[0] - a[0] for a, b in zip(switched[::2], switched[1::2], strict=True)]
    # the records tell the pulse the pin really gave; the main loop switches it within 100 us
    assert all(abs(w - p) <= DRIVE_TOLERANCE_NS for w, p in zip(widths, pins, strict=True))
    assert all(abs(p - 3_000_000) <= 100_000 for p in pins)


def test_shortest_resolvable_pulse(blsim: Path, avr_elf: Path, tmp_path: Path) -> None:
    """Isolated pulses on an idle board, the README's figures: under about 1 us the pin is back
    before the interrupt samples it (the pulse is counted as missed); up to the interrupts-off part
    of one capture stub (about 4 us) the second edge waits for it, so the width reads as at most
    6.5 us (documented bound: 4 us, plus margin); from there on widths are exact within the
    isolated-edge tolerance."""
    widths = [250, 500, 3_000, 6_000, 15_000, 40_000]
    lines, t = [], 10_000_000
    for w in widths:
        lines += [f"{t} edge 3 1", f"{t + w} edge 3 0"]
        t += 2_000_000
    script = "\n".join(lines) + f"\n{t + 600_000_000} end\n"
    path = tmp_path / "pulses.txt"
    path.write_text(script)
    out = tmp_path / "out.bin"
    subprocess.run(
        [str(blsim), "--elf", str(avr_elf), "--script", str(path), "--out", str(out)],
        check=True,
        capture_output=True,
        timeout=HANG_S,
    )
    records = decode_all(out.read_bytes())
    got = edge_rows(records)
    measured = [(b[2] - a[2]) * TICK_NS for a, b in zip(got[::2], got[1::2], strict=True)]
    print(f"\npulses of {widths} ns read as {measured} ns")
    # a missed pulse costs one or two interrupts that find no change; each is counted
    notes = [r.text for r in others(records) if isinstance(r, Notice)]
    suffix = "pin changes too short to time since reset"
    counted = [int(t.split()[0]) for t in notes if t.endswith(suffix)]
    assert 4 <= len(measured) <= 5 and counted and counted[0] >= len(widths) - len(measured)
    for m, w in zip(measured[-4:-2], widths[2:4], strict=True):
        assert w <= m <= 6_500
    for m, w in zip(measured[-2:], widths[4:], strict=True):
        assert abs(m - w) <= ISOLATED_TOLERANCE_NS


def run_to_file(blsim: Path, avr_elf: Path, script: str, tmp_path: Path) -> list:
    path = tmp_path / "script.txt"
    path.write_text(script)
    out = tmp_path / "out.bin"
    command = [str(blsim), "--elf", str(avr_elf), "--script", str(path), "--out", str(out)]
    subprocess.run(command, check=True, capture_output=True, timeout=HANG_S)
    return decode_all(out.read_bytes())


def test_edges_at_the_16_bit_timer_wrap_keep_their_high_half(
    blsim: Path, avr_elf: Path, tmp_path: Path
) -> None:
    """The software extension of Timer1 to 32 bits: an edge sampled just before or just after the
    hardware counter wraps (every 32.768 ms), while the overflow interrupt is still pending, must
    not be 32.768 ms off."""
    probe = edge_rows(run_to_file(blsim, avr_elf, "10000000 edge 5 1\n30000000 end\n", tmp_path))
    timer_start_ns = 10_000_000 - probe[0][2] * TICK_NS  # the emulation is deterministic
    offsets = [-2_000, -1_000, -500, -250, 0, 250, 500, 1_000, 2_000, 4_000]
    rows, level = [], 0
    for k, delta in enumerate(offsets, start=1):
        level ^= 1
        rows.append((timer_start_ns + k * 2**16 * TICK_NS + delta, level))
    script = "".join(f"{t} edge 5 {lv}\n" for t, lv in rows) + f"{rows[-1][0] + 600_000_000} end\n"
    got = edge_rows(run_to_file(blsim, avr_elf, script, tmp_path))
    assert [lv for _, lv, _ in got] == [lv for _, lv in rows]
    for (_, _, tick), (t, _) in zip(got, rows, strict=True):
        assert abs(tick * TICK_NS + timer_start_ns - t) <= ISOLATED_TOLERANCE_NS


def _on_pty(blsim: Path, avr_elf: Path, script: Path, *flags: str) -> tuple[subprocess.Popen, str]:
    """The harness running `script` with its UART on a pty: the process, and the port's path once it
    has said it (ended here if it does not get that far)."""
    proc = subprocess.Popen(
        [str(blsim), "--elf", str(avr_elf), "--script", str(script), "--pty", *flags],
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        first = proc.stdout.readline().split()
        while first[:1] == ["Loaded"]:  # libsimavr's own words on loading the image
            first = proc.stdout.readline().split()
        assert first[:1] == ["pty"], first
    except BaseException:
        _end(proc)
        raise
    return proc, first[1]


def _relay_board(blsim: Path, avr_elf: Path, tmp_path: Path, *flags: str) -> tuple[subprocess.Popen, str]:
    """The emulated board on a pty with a relay on every channel, running until told on its input
    (a ceiling of HANG_S otherwise): the harness process and the port's path."""
    script = tmp_path / "script.txt"
    script.write_text(f"{int(HANG_S * 1e9)} end\n")  # ended on stdin once the run is recorded
    return _on_pty(blsim, avr_elf, script, "--relay", "2000", *flags)


def _fw_writer(store, channels, n: int, on_us: int, off_us: int):
    """A run of `n` cycles on relay units at `channels`: (units by channel, the run's writer)."""
    lot = store.register_lot(store.register_part("FW-RELAY", "test"), "L1")
    units = {ch: store.register_unit(lot, f"R-{ch}") for ch in channels}
    profile = {"on_ms": on_us / 1000, "off_ms": off_us / 1000, "cycles": n}
    bench = store.register_bench("fw bench")
    return units, store.start_run(bench, units, profile=profile, target_cycles=n)


def _board_up(proc, rec, feed, timer, stop) -> None:
    """Start the emulation (and the hang ceiling's timer) and read until the board has announced itself."""
    proc.stdin.write("go\n")
    proc.stdin.flush()
    timer.start()
    while not any(t.announcements for t in feed.batches) and not stop.is_set():
        rec.push(feed.poll(0.05))  # the board is up: its announcement is in


class _Observed:
    """The real feed, with every batch it gives the recorder kept for the test to read afterwards."""

    def __init__(self, feed: Feed) -> None:
        self.feed = feed
        self.batches: list = []

    def poll(self, timeout: float = 0.1):
        timed = self.feed.poll(timeout)
        self.batches.append(timed)
        return timed

    def __getattr__(self, name: str):
        return getattr(self.feed, name)


@pytest.mark.parametrize("strap", ["line", "packed"])
def test_emulated_board_speaks_version_2_to_the_recorder(
    blsim: Path, avr_elf: Path, tmp_path: Path, strap: str
) -> None:
    """Protocol version 2 on the emulated board through the host's whole recording path (pty, pyserial,
    decoder, timeline, recorder, store): a relay on channels 0 and 6 (one on each input port) follows its
    actuator; the recorder plans N cycles on both and records until the sampler says they are done. The
    board acknowledges PLAN and GO, numbers every drive 1..N per channel, its beats count the cycles
    the drives completed, and the store's life counts are N exactly, each cycle measured."""
    n, on_us, off_us, channels = 12, 10_000, 10_000, (0, 6)
    proc, port = _relay_board(blsim, avr_elf, tmp_path, *(["--packed-strap"] if strap == "packed" else []))
    stop = threading.Event()
    timer = threading.Timer(HANG_S, stop.set)  # a ceiling only a hang reaches
    try:
        with Store.open(str(tmp_path / "fw.sqlite")) as store:
            units, writer = _fw_writer(store, channels, n, on_us, off_us)
            # the relay settles within 0.1 ms of each switching; a cycle is 20 ms
            rec = Recorder(writer, settings=AnalysisSettings(settle_ns=2_000_000))
            with Feed(port, baudrate=500_000, wait_s=5.0, backoff_s=(0.01, 0.1)) as live:
                feed = _Observed(live)
                _board_up(proc, rec, feed, timer, stop)
                feed.start_cycling(rec.plans(on_us, off_us))
                reason = rec.run(feed, stop, grace_s=0.3)
                faults = live.counters.decode_faults
            proc.stdin.write("end\n")  # the run is recorded: stop the emulation
            proc.stdin.flush()
            done = proc.stdout.readline()
            assert done.startswith("done"), done + proc.stderr.read()
            run_units = store.run_units(writer.run_id)
            unobserved = store.incidents(writer.run_id, kind=CYCLES_NOT_OBSERVED)
            makes = {ch: store.actuations(units=[units[ch]], kind="make")["cycle"] for ch in channels}
    finally:
        timer.cancel()
        _end(proc)

    stack_bytes = int(done.split()[4])  # deepest stack the harness saw
    print(f"\n{strap} form, recorder path: stack {stack_bytes} bytes at most")
    assert reason == END_TARGET and faults == 0
    assert stack_bytes <= STACK - 64
    batches = feed.batches
    assert [a.version for t in batches for a in t.announcements] == [2]
    accepted = [a.record for t in batches for a in t.accepted]
    drive_t = np.concatenate([t.drives.t_ns for t in batches])
    drive_ch = np.concatenate([t.drives.channel for t in batches])
    drive_lv = np.concatenate([t.drives.level for t in batches])
    drive_cy = np.concatenate([t.drives.cycle for t in batches if t.drives.cycle is not None])
    assert len(drive_cy) == len(drive_t)  # every drive numbered
    assert accepted == [
        PlanAccepted(0, on_us, off_us, n),
        PlanAccepted(6, on_us, off_us, n),
        GoAccepted(channels, accepted[-1].tick),  # its tick against the drives: the test above
    ]
    offs = {}
    for ch in channels:
        mine = np.flatnonzero(drive_ch == ch)
        mine = mine[np.argsort(drive_t[mine], kind="stable")]
        assert drive_lv[mine].tolist() == [1, 0] * n
        assert drive_cy[mine].tolist() == [c for c in range(1, n + 1) for _ in (0, 1)]  # 1..N, on and off
        offs[ch] = np.sort(drive_t[mine][drive_lv[mine] == 0])
    counts = [c for t in batches for c in t.counts]
    assert counts and all(c.short == 0 for c in counts)
    for c in counts:  # each beat counts the cycles whose drive-off came before it
        for ch, k in c.cycles:
            before = int(np.searchsorted(offs[ch], c.t_ns, side="left"))
            assert before <= k <= int(np.searchsorted(offs[ch], c.t_ns, side="right")), (c, ch)
    assert dict(counts[-1].cycles) == dict.fromkeys(channels, n)
    # the store: the sampler's count is each unit's life in this run, every cycle measured
    assert {ru.channel: ru.cycles_done for ru in run_units} == dict.fromkeys(channels, n)
    assert {ru.channel: ru.unit.cycles for ru in run_units} == dict.fromkeys(channels, n)
    assert unobserved == []
    assert {ch: sorted(m.tolist()) for ch, m in makes.items()} == dict.fromkeys(channels, list(range(n)))


class _ResetAt(_Observed):
    """The feed, and the board's supply pulled (`reset` to the harness) once every planned channel's
    drive-off of cycle `at` has reached the host."""

    def __init__(self, feed: Feed, proc, channels, at: int) -> None:
        super().__init__(feed)
        self.proc, self.channels, self.at = proc, channels, at
        self.offs = dict.fromkeys(channels, 0)
        self.reset_sent = False

    def poll(self, timeout: float = 0.1):
        timed = super().poll(timeout)
        if timed is not None and not self.reset_sent:
            d = timed.drives
            for ch in self.channels:
                self.offs[ch] += int(((d.channel == ch) & (d.level == 0)).sum())
            if all(k >= self.at for k in self.offs.values()):
                self.reset_sent = True
                self.proc.stdin.write("reset\n")
                self.proc.stdin.flush()
        return timed


def test_emulated_board_reset_mid_run_is_planned_again_and_counts_true(
    blsim: Path, avr_elf: Path, tmp_path: Path
) -> None:
    """A bus-powered board that loses its supply mid-run (the harness resets the emulated part, its
    actuators dropping out): the firmware starts again and announces itself, the recorder records the
    reset and plans the cycles still due, and each unit's life in the store equals the cycles its
    actuator really made, by the harness's own log of the actuator pins (the ground truth here). The
    reset comes in a long off phase, after the host has heard cycle 4's drive-off, so no drive-on is in
    flight when the power goes."""
    n, on_us, off_us, channels, at = 10, 10_000, 200_000, (0, 6), 4
    log = tmp_path / "actuators.txt"
    proc, port = _relay_board(blsim, avr_elf, tmp_path, "--actuator-log", str(log))
    stop = threading.Event()
    timer = threading.Timer(HANG_S, stop.set)  # a ceiling only a hang reaches
    try:
        with Store.open(str(tmp_path / "fw.sqlite")) as store:
            units, writer = _fw_writer(store, channels, n, on_us, off_us)
            rec = Recorder(writer, settings=AnalysisSettings(settle_ns=2_000_000))
            with Feed(port, baudrate=500_000, wait_s=5.0, backoff_s=(0.01, 0.1)) as live:
                feed = _ResetAt(live, proc, channels, at)
                _board_up(proc, rec, feed, timer, stop)
                rec.start(feed, on_us, off_us)
                reason = rec.run(feed, stop, grace_s=0.3)
            proc.stdin.write("end\n")  # the run is recorded: stop the emulation
            proc.stdin.flush()
            done = proc.stdout.readline()
            assert done.startswith("done"), done + proc.stderr.read()
            run_units = store.run_units(writer.run_id)
            resets = store.incidents(writer.run_id, kind=RESET)
            unobserved = store.incidents(writer.run_id, kind=CYCLES_NOT_OBSERVED)
            makes = {ch: store.actuations(units=[units[ch]], kind="make")["cycle"] for ch in channels}
    finally:
        timer.cancel()
        _end(proc)

    assert feed.reset_sent and reason == END_TARGET
    assert [a.version for t in feed.batches for a in t.announcements] == [2, 2]  # at power-up, and again
    assert len(resets) == 1
    # the truth: the actuator pins as the harness saw them switch
    lines = [ln.split() for ln in log.read_text().splitlines()]
    cut = next(i for i, ln in enumerate(lines) if ln[1] == "reset")
    ons = {ch: sum(1 for ln in lines if ln[1:] == [str(ch), "1"]) for ch in channels}
    before = {ch: sum(1 for ln in lines[:cut] if ln[1:] == [str(ch), "1"]) for ch in channels}
    assert all(at <= k < n for k in before.values()), before  # the reset came mid-run
    assert ons == dict.fromkeys(channels, n)  # re-planned for the cycles still due, no more, no fewer
    accepted = [a.record for t in feed.batches for a in t.accepted]
    replans = [a for a in accepted if isinstance(a, PlanAccepted)][len(channels) :]
    assert {a.channel: a.cycles for a in replans} == {ch: n - before[ch] for ch in channels}
    # the store: each unit's life is the cycles its actuator made, every one measured once
    assert {ru.channel: ru.cycles_done for ru in run_units} == ons
    assert {ru.channel: ru.unit.cycles for ru in run_units} == ons
    assert unobserved == []
    assert {ch: sorted(m.tolist()) for ch, m in makes.items()} == dict.fromkeys(channels, list(range(n)))
