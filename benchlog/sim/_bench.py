"""The simulated sampler without I/O: units, cycle plans, the sampler's clock and buffer, faults.

`Bench` is driven by time: `advance_to(t_ns)` returns the records the sampler sends up to true time
`t_ns`, in tick order; `encode(records)` turns them into bytes of the current form (with byte damage
when asked). The pty server (`_pty.py`) and in-process tests use the same object.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from benchlog.sim._config import SimConfig
from benchlog.sim._physics import DRIVE, EDGE, TRUTH_DTYPE, UnitState, cycles, draw_unit
from benchlog.wire import (
    PROTOCOL_VERSION,
    Announce,
    Beat,
    Drive,
    Edges,
    Go,
    GoAccepted,
    Halt,
    LineEncoder,
    Notice,
    PackedEncoder,
    Ping,
    Plan,
    PlanAccepted,
    Pong,
    SetForm,
    Who,
    parse_command,
)

MAX_CYCLES_PER_STEP = 20_000  # per channel; a longer step is cut short (its end is returned)
LOOKAHEAD_NS = 2_000_000_000  # cycles are generated this far ahead, in batches (numpy per batch)
MAX_LOOKAHEAD_CYCLES = 2_000
RNG_BLOCK = 50  # cycles are drawn in blocks of this many from their channel's own random stream

SENT_DTYPE = np.dtype(
    [
        ("t_ns", np.int64),
        ("channel", np.uint8),
        ("level", np.uint8),
        ("session", np.int32),
        ("tick", np.int64),
    ]
)


@dataclass(slots=True)
class _Running:
    start_ns: int
    on_ns: int
    off_ns: int
    cycles: int  # 0 = until stopped
    generated: int = 0

    @property
    def period(self) -> int:
        return self.on_ns + self.off_ns

    def wanted_until(self, t_ns: int) -> int:
        """Cycles whose drive-on falls before `t_ns`."""
        n = max(0, -(-(t_ns - self.start_ns) // self.period))
        return min(n, self.cycles) if self.cycles else n


class Truth:
    """What the simulator really did: units' lives and modes, every actuation, every edge it sent, and
    `cycles`: per channel, the cycles the sampler started (switched its actuator on), over every plan and
    reset; a unit's true cycle count (a started cycle completes unless the board loses power)."""

    def __init__(self, units: list[UnitState]) -> None:
        self.units = units
        self.cycles: dict[int, int] = {}
        self._act: list[np.ndarray] = []
        self._sent: list[np.ndarray] = []
        self.resets: list[int] = []  # true time of each reset
        self.lost_in_reset = 0  # edges that happened while the sampler was rebooting
        self.dropped_by_buffer = 0

    @property
    def actuations(self) -> np.ndarray:
        if len(self._act) > 1:
            self._act = [np.concatenate(self._act)]
        return self._act[0] if self._act else np.zeros(0, TRUTH_DTYPE)

    @property
    def sent(self) -> np.ndarray:
        """Edges put on the wire (before any byte damage or outage), SENT_DTYPE; `tick` is unwrapped
        within its session (sessions are numbered from 0 and end at a reset)."""
        if len(self._sent) > 1:
            self._sent = [np.concatenate(self._sent)]
        return self._sent[0] if self._sent else np.zeros(0, SENT_DTYPE)

    def lives(self) -> dict[int, tuple[float, str]]:
        return {u.channel: (u.life, u.mode) for u in self.units}


class Bench:
    """A simulated sampler with its units. `seed` makes everything reproducible."""

    def __init__(self, config: SimConfig, seed: int = 0, keep_truth: bool = True) -> None:
        self.config = config
        s = config.sampler
        self.rng = np.random.default_rng(seed)
        self._byte_rng = np.random.default_rng([seed, 1])
        self._seed = seed
        self._streams: dict[int, np.random.Generator] = {}
        self.units = {
            u.channel: draw_unit(self.rng, u.channel, u.serial, config.populations[u.population])
            for u in config.units
        }
        self.truth = Truth(list(self.units.values()))
        self.keep_truth = keep_truth
        self.now_ns = 0
        self.form = s.form
        self._mask = (1 << s.counter_bits) - 1
        self._rate = s.clock_hz * (1 + s.ppm * 1e-6) / 1e9  # ticks per true ns
        quarter_s = 2 ** (s.counter_bits - 2) / s.clock_hz
        self.beat_ns = int(min(s.beat_s, 1.0, 0.5 * quarter_s) * 1e9)
        self._origin_ns = 0  # true time at which the counter read 0
        self._session = 0
        self._blind_until = -1
        self.captured = 0
        self.dropped = 0
        self._next_beat = 0
        self.plans: dict[int, Plan] = {}
        self._running: dict[int, _Running] = {}
        self._pending = (
            np.zeros(0, np.int64),
            np.zeros(0, np.uint8),
            np.zeros(0, np.uint8),
            np.zeros(0, np.uint8),
            np.zeros(0, np.int64),  # the event's cycle in its channel's run (1 = first after GO)
        )
        # the sampler's own count: cycles completed per channel since its plan started (reported in
        # beats), and per channel the run cycle its count restarted from at a reset
        self.cycles_done: dict[int, int] = {}
        self._cycle_base: dict[int, int] = {}
        self._fresh = True  # nothing sent since reset: a 0x00 (packed) or an empty line first
        self._reset_at: int | None = None
        self._reset_done = False
        self._buffer_level = 0.0
        self._buffer_bin = -1
        self._encoders = {"line": LineEncoder(version=PROTOCOL_VERSION), "packed": PackedEncoder()}
        self.started = False
        self.edges_generated = 0

    # -- clock -------------------------------------------------------------------------------------
    def ticks(self, t_ns: np.ndarray | int) -> np.ndarray:
        """Unwrapped counter values (since the last reset) at true times `t_ns`."""
        return np.floor((np.asarray(t_ns, np.int64) - self._origin_ns) * self._rate).astype(np.int64)

    def _tick(self, t_ns: int) -> int:
        return int(self.ticks(t_ns)) & self._mask

    def announcement(self) -> Announce:
        s = self.config.sampler
        return Announce(PROTOCOL_VERSION, s.clock_hz, s.counter_bits, s.channels, s.board_id)

    def _beat(self, t_ns: int) -> Beat:
        return Beat(
            self._tick(t_ns),
            self.captured & 0xFFFFFFFF,
            self.dropped & 0xFFFFFFFF,
            0,  # the model widens a pulse too short for the input stage instead of missing it
            self._counts(),
        )

    def _counts(self) -> tuple[tuple[int, int], ...]:
        return tuple((c, n & 0xFFFFFFFF) for c, n in sorted(self.cycles_done.items()))

    # -- commands ----------------------------------------------------------------------------------
    def start(self) -> list:
        """Power-up: the announcement, then a beat. Autostart plans from the config begin here."""
        self.started = True
        recs = [self.announcement(), self._beat(self.now_ns)]
        self._next_beat = self.now_ns + self.beat_ns
        auto = self.config.autostart
        if auto:
            for u in self.config.units:
                self.command(Plan(u.channel, int(auto.on_ms * 1000), int(auto.off_ms * 1000), auto.cycles))
            recs += self.command(Go())
        return recs

    def command_line(self, line: bytes) -> list:
        cmd = parse_command(line)
        if cmd is None:
            text = line.decode("ascii", "replace").strip()[:60]
            safe = "".join(c if c.isprintable() and c.isascii() else "?" for c in text)
            return [Notice(f"not understood: {safe}")]
        return self.command(cmd)

    def command(self, cmd: object) -> list:
        """Obey one host command at the current time; returns the immediate replies."""
        match cmd:
            case Who():
                return [self.announcement()]
            case Ping(token):
                return [Pong(token)]
            case SetForm(form):
                new = "line" if form == "L" else "packed"
                self._fresh = self._fresh or (new == "packed" and self.form != "packed")
                self.form = new
                return []
            case Plan():
                if cmd.channel >= self.config.sampler.channels:
                    return [Notice(f"no channel {cmd.channel}")]
                self.plans[cmd.channel] = cmd
                return [PlanAccepted(cmd.channel, cmd.on_us, cmd.off_us, cmd.cycles)]
            case Go():
                start = self.now_ns + 100_000
                first = True
                started = []
                for ch, p in sorted(self.plans.items()):
                    if ch in self._running:
                        continue
                    run = _Running(start, p.on_us * 1000, p.off_us * 1000, p.cycles)
                    self._running[ch] = run
                    self.cycles_done[ch] = 0
                    self._cycle_base[ch] = 0
                    started.append(ch)
                    n = self.config.faults.reset_at_cycle
                    if first and n >= 0 and not self._reset_done and (not p.cycles or n < p.cycles):
                        self._reset_at = start + n * run.period - run.off_ns // 2
                    first = False
                return [GoAccepted(tuple(started), self._tick(start))]
            case Halt():
                # the cycle in progress finishes (its drive-off is already scheduled); no new cycle starts
                for ch, run in list(self._running.items()):
                    started = self._truncate(ch, run, self.now_ns)
                    if started:
                        run.cycles = started
                    else:
                        del self._running[ch]
                self.plans.clear()
                return []
        return [Notice("not understood")]

    def _truncate(self, ch: int, run: _Running, t_ns: int) -> int:
        """Forget the cycles generated ahead that had not started by `t_ns`; returns how many started."""
        started = min(run.wanted_until(t_ns), run.generated)
        extra = run.generated - started
        if extra:
            cut_ns = run.start_ns + started * run.period
            t, _, chan, _, _ = self._pending
            keep = ~((chan == ch) & (t >= cut_ns))
            self._pending = tuple(a[keep] for a in self._pending)  # type: ignore[assignment]
            run.generated = started
            unit = self.units.get(ch)
            if unit is not None:
                unit.cycles_done -= extra
                first_dropped = unit.cycles_done
                if self.keep_truth and self.truth._act:
                    act = self.truth.actuations
                    self.truth._act = [act[~((act["channel"] == ch) & (act["cycle"] >= first_dropped))]]
        return started

    def _cleanup_running(self) -> None:
        done = [
            ch
            for ch, r in self._running.items()
            if r.cycles and r.generated >= r.cycles and self.now_ns >= r.start_ns + r.cycles * r.period
        ]
        for ch in done:
            del self._running[ch]

    # -- generation --------------------------------------------------------------------------------
    def _stream(self, channel: int) -> np.random.Generator:
        """The channel's own random stream (its cycles' draws, in order)."""
        g = self._streams.get(channel)
        if g is None:
            g = self._streams[channel] = np.random.default_rng([self._seed, 2, channel])
        return g

    def _generate(self, t_end: int) -> int:
        """Generate cycles starting before `t_end` (fewer if too many); returns the time up to which
        every event is known."""
        s = self.config.sampler
        known = t_end
        parts = [self._pending]
        for ch, run in self._running.items():
            unit = self.units.get(ch)
            want = run.wanted_until(t_end) - run.generated
            if want <= 0:
                continue
            ahead = min(MAX_LOOKAHEAD_CYCLES, max(1, LOOKAHEAD_NS // run.period))
            if run.cycles:
                ahead = min(ahead, run.cycles - run.generated)
            want = max(want, ahead)
            # whole blocks from the channel's own stream: the draws never depend on how wall-clock
            # timing cut sampler time into steps, so a seed gives the same units however the host ran
            end = -(-(run.generated + want) // RNG_BLOCK) * RNG_BLOCK
            want = (min(end, run.cycles) if run.cycles else end) - run.generated
            if want > MAX_CYCLES_PER_STEP:
                want = MAX_CYCLES_PER_STEP
                known = min(known, run.start_ns + (run.generated + want) * run.period)
            t0 = run.start_ns + run.generated * run.period
            run.generated += want
            if unit is None:  # a plan on a channel with nothing wired: drives only
                k = np.arange(want, dtype=np.int64)
                t = np.stack([t0 + k * run.period, t0 + k * run.period + run.on_ns], 1).ravel()
                kind = np.full(len(t), DRIVE, np.uint8)
                level = np.tile(np.array([1, 0], np.uint8), want)
            else:
                pieces = []
                for k in range(0, want, RNG_BLOCK):
                    n = min(RNG_BLOCK, want - k)
                    (tk, kk, lk), truth = cycles(
                        self._stream(ch), unit, t0 + k * run.period, run.on_ns, run.off_ns, n,
                        s.max_bounces, s.min_pulse_us,
                    )  # fmt: skip
                    pieces.append((tk, kk, lk))
                    if self.keep_truth:
                        self.truth._act.append(truth)
                t, kind, level = (np.concatenate([p[i] for p in pieces]) for i in range(3))
            cyc = (t - run.start_ns) // run.period + 1
            parts.append((t, kind, np.full(len(t), ch, np.uint8), level, cyc))
        if len(parts) > 1:
            t = np.concatenate([p[0] for p in parts])
            order = np.argsort(t, kind="stable")
            self._pending = tuple(np.concatenate([p[i] for p in parts])[order] for i in range(5))  # type: ignore[assignment]
        return known

    def _take(self, t_end: int) -> tuple[np.ndarray, ...]:
        cut = int(np.searchsorted(self._pending[0], t_end, side="left"))
        taken = tuple(a[:cut] for a in self._pending)
        self._pending = tuple(a[cut:] for a in self._pending)  # type: ignore[assignment]
        return taken  # type: ignore[return-value]

    def _buffer_drops(self, t: np.ndarray) -> np.ndarray:
        """Which of these edges (true times, sorted) the sampler's full buffer drops.

        The buffer holds `buffer_edges` and drains at `drain_edges_per_s`; computed per 1 ms bin (a
        loop over bins, not over edges)."""
        f = self.config.faults
        drop = np.zeros(len(t), bool)
        if not f.buffer_edges or not len(t):
            return drop
        bin_ns = 1_000_000
        bins = t // bin_ns
        uniq, first, counts = np.unique(bins, return_index=True, return_counts=True)
        drain = f.drain_edges_per_s * bin_ns / 1e9
        cap = float(f.buffer_edges)
        level, last = self._buffer_level, self._buffer_bin
        for b, s0, n in zip(uniq.tolist(), first.tolist(), counts.tolist(), strict=True):
            level = max(0.0, level - drain * (b - last)) if last >= 0 else 0.0
            last = b
            room = max(int(cap - level), 0)
            if n > room:
                drop[s0 + room : s0 + n] = True
                level = cap
            else:
                level += n
        self._buffer_level, self._buffer_bin = level, last
        return drop

    def advance_to(self, t_end: int) -> list:
        """Run the sampler up to true time `t_end` (ns); the records it sends, in order.

        May stop short when a step would be very long; `now_ns` tells how far it got."""
        if not self.started:
            recs = self.start()
        else:
            recs = []
        while self.now_ns < t_end:
            stop = t_end
            if self._reset_at is not None and self.now_ns <= self._reset_at < stop:
                stop = self._reset_at
            stop = self._generate(stop)
            recs += self._emit(self._take(stop), self.now_ns, stop)
            self.now_ns = stop
            self._cleanup_running()
            if self._reset_at is not None and self.now_ns >= self._reset_at:
                recs += self._reset()
        return recs

    def power_cycle(self, off_ns: int) -> list:
        """The board lost power for `off_ns` (a bus-powered board on a pulled cable): the cycle in
        progress is cut short, plans are forgotten, and it comes back reset."""
        for ch, run in self._running.items():
            self._truncate(ch, run, self.now_ns)
        self._running.clear()
        self.plans.clear()
        self._pending = tuple(a[:0] for a in self._pending)  # type: ignore[assignment]
        self.now_ns += int(off_ns)
        return self._reset()

    def _count_cycles(self, kind: np.ndarray, chan: np.ndarray, level: np.ndarray, cyc: np.ndarray) -> None:
        """A drive-on starts a cycle of the unit (the truth: its coil was energised, its contact moved
        even when power failed before the drive-off); a drive-off completes it (the sampler's count)."""
        drive = kind == DRIVE
        for ch, lv, c in zip(chan[drive].tolist(), level[drive].tolist(), cyc[drive].tolist(), strict=True):
            if lv:
                self.truth.cycles[ch] = self.truth.cycles.get(ch, 0) + 1
            elif ch in self.cycles_done:
                self.cycles_done[ch] = c - self._cycle_base.get(ch, 0)

    def _reset(self) -> list:
        """The sampler restarts: blind for `boot_ms`, counter from 0, counts from 0, default form."""
        s = self.config.sampler
        t = self.now_ns
        boot = int(s.boot_ms * 1e6)
        self.truth.resets.append(t)
        self._reset_at = None
        self._reset_done = True
        self._generate(t + boot)
        blind = self._take(t + boot)
        self._count_cycles(blind[1], blind[2], blind[3], blind[4])
        lost = int(np.count_nonzero(blind[1] == EDGE))
        self.truth.lost_in_reset += lost
        self.edges_generated += lost
        self.now_ns = t + boot
        self._origin_ns = t + boot
        self._session += 1
        self.captured = 0
        self.dropped = 0
        self._buffer_level = 0.0
        self._buffer_bin = -1
        self.form = s.form
        self._encoders = {"line": LineEncoder(version=PROTOCOL_VERSION), "packed": PackedEncoder()}
        self._fresh = True
        # the count restarts with the sampler; a cycle driver that runs on counts from here
        done = {ch: n for ch, n in self.cycles_done.items() if ch in self._running}
        self._cycle_base = {ch: self._cycle_base.get(ch, 0) + n for ch, n in done.items()}
        self.cycles_done = dict.fromkeys(done, 0)
        self._next_beat = self.now_ns + self.beat_ns
        return [self.announcement(), self._beat(self.now_ns)]

    def _emit(self, ev: tuple[np.ndarray, ...], t_from: int, t_to: int) -> list:
        t, kind, chan, level, cyc = ev
        is_edge = kind == EDGE
        edge_t = t[is_edge]
        self.edges_generated += len(edge_t)
        dropped = self._buffer_drops(edge_t)
        keep = np.ones(len(t), bool)
        keep[np.flatnonzero(is_edge)[dropped]] = False
        n_drop = int(dropped.sum())
        self.truth.dropped_by_buffer += n_drop
        # cumulative captured/dropped counts up to each edge, for beats
        cum_cap = np.arange(1, len(edge_t) + 1)
        cum_drop = np.cumsum(dropped)
        ticks = self.ticks(t)
        t, kind, chan, level, ticks, cyc = (
            t[keep],
            kind[keep],
            chan[keep],
            level[keep],
            ticks[keep],
            cyc[keep],
        )
        is_edge = kind == EDGE
        if self.keep_truth and is_edge.any():
            sent = np.zeros(int(is_edge.sum()), SENT_DTYPE)
            sent["t_ns"], sent["channel"], sent["level"] = t[is_edge], chan[is_edge], level[is_edge]
            sent["session"], sent["tick"] = self._session, ticks[is_edge]
            self.truth._sent.append(sent)
        beats = []
        while self._next_beat < t_to:
            beats.append(self._next_beat)
            self._next_beat += self.beat_ns
        drive_idx = np.flatnonzero(~is_edge)
        # breakpoints: drives (by index into kept events) and beats (by time)
        breaks = [(int(t[i]), 0, int(i)) for i in drive_idx.tolist()] + [(b, 1, -1) for b in beats]
        breaks.sort()
        out: list = []
        mask = np.uint64(self._mask)
        wrapped = ticks.astype(np.uint64) & mask
        pos = 0
        base_cap, base_drop = self.captured, self.dropped
        for bt, typ, idx in breaks:
            end = idx if typ == 0 else int(np.searchsorted(t, bt, side="left"))
            if end > pos:
                sel = slice(pos, end)
                e = is_edge[sel]
                if e.any():
                    out.append(Edges(chan[sel][e], level[sel][e], wrapped[sel][e]))
                pos = end
            if typ == 0:
                ch, lv = int(chan[idx]), int(level[idx])
                cycle = int(cyc[idx]) - self._cycle_base.get(ch, 0)
                out.append(Drive(ch, lv, int(wrapped[idx]), max(cycle, 0) & 0xFFFFFFFF))
                one = slice(idx, idx + 1)
                self._count_cycles(kind[one], chan[one], level[one], cyc[one])
                pos = idx + 1
            else:
                k = int(np.searchsorted(edge_t, bt, side="left"))
                cap = base_cap + k
                drp = base_drop + (int(cum_drop[k - 1]) if k else 0)
                out.append(Beat(self._tick(bt), cap & 0xFFFFFFFF, drp & 0xFFFFFFFF, 0, self._counts()))
        if pos < len(t):
            e = is_edge[pos:]
            if e.any():
                out.append(Edges(chan[pos:][e], level[pos:][e], wrapped[pos:][e]))
        self.captured = base_cap + len(cum_cap)
        self.dropped = base_drop + n_drop
        return out

    # -- bytes -------------------------------------------------------------------------------------
    def encode(self, records: list) -> bytes:
        enc = self._encoders[self.form]
        data = b"".join(enc.encode(r) for r in records)
        if data and self._fresh:
            self._fresh = False
            # whatever came before (a line or frame the reset cut), the first record starts clean
            data = (b"\0" if self.form == "packed" else b"\r\n") + data
        return data

    def damage(self, data: bytes, t_ns: int | None = None) -> bytes:
        """Byte faults (drop / flip at the configured rates) on bytes the sampler sends at `t_ns`."""
        f = self.config.faults
        if not (f.drop_rate or f.flip_rate) or not data:
            return data
        t_s = (self.now_ns if t_ns is None else t_ns) / 1e9
        if not f.damage_from_s <= t_s < f.damage_until_s:
            return data
        buf = np.frombuffer(data, np.uint8).copy()
        rng = self._byte_rng
        if f.flip_rate:
            hit = np.flatnonzero(rng.random(len(buf)) < f.flip_rate)
            buf[hit] ^= (1 << rng.integers(0, 8, len(hit))).astype(np.uint8)
        if f.drop_rate:
            buf = buf[rng.random(len(buf)) >= f.drop_rate]
        return buf.tobytes()

    def step_bytes(self, t_end: int) -> bytes:
        """`advance_to` and encode, with byte damage applied: what goes down the wire."""
        return self.damage(self.encode(self.advance_to(t_end)))

    def pending_cycles(self) -> bool:
        return bool(self._running)


def run_seconds(config: SimConfig, seconds: float, on_ms: float, off_ms: float, seed: int = 0) -> Bench:
    """Convenience for tests and examples: plan every unit, GO, and run `seconds` of sampler time."""
    bench = Bench(config, seed)
    bench.advance_to(0)
    for ch in bench.units:
        bench.command(Plan(ch, int(on_ms * 1000), int(off_ms * 1000), 0))
    bench.command(Go())
    t_end = int(seconds * 1e9)
    while bench.now_ns < t_end:
        bench.advance_to(t_end)
    return bench


__all__ = ["Bench", "Truth", "SENT_DTYPE", "run_seconds"]
