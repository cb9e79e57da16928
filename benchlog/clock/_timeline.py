"""The clock stage: raw records with wrapping ticks -> run-time records and incidents.

How this works
--------------
Run time (`t_ns`) is built per *epoch*, a stretch in which the sampler's counter ran without restarting.
Within an epoch every tick is unwrapped into `rel`, an unbounded int64 tick count, by adding the signed
modular delta to the previous record's tick: the protocol promises a beat every quarter wrap, so
consecutive records are never half a wrap apart, and a small backwards step (records of different
channels interleave) stays a small backwards step. `t_ns = epoch_ns0 + floor(rel * 1e9 / clock_hz)`,
computed exactly with integers.

An epoch ends at a sampler reset, recognised by:
- an announcement the host did not ask for (`expect_announcement` marks one that it did), or one whose
  parameters changed;
- a tick more than `back_tolerance` behind the latest tick of the epoch (a restarted counter);
- a tick ahead of the host clock: its receive offset (host time - run time) more than 1 s (+ 2 % of the
  time since) below the least offset of earlier pushes; data cannot arrive before it was sampled, and a
  backlogged reader only raises offsets.
The new epoch's counter started at 0 at the reset, so its `rel` is the raw tick, and `epoch_ns0` is set
from the host time elapsed since the last record: never before the last run time, so run time stays
monotonic. A RESET incident spans the bridged stretch.

After a reported outage (`note_disconnect`) longer than a quarter wrap, wraps may have been missed (unless
the frames after it continue the sampler's sequence: `outage_bridged`, nothing was lost): the
first tick is placed by the host time elapsed: the whole number of wraps that brings the sampler's
elapsed time closest to the host's. Where the wrap period is under 4 s host jitter makes that count
doubtful, and a CLOCK incident says so.

Lost edges: each beat says how many edges the sampler captured and dropped since its reset. Edges still in
flight when a beat is sent arrive after it, so a beat is settled when the next beat arrives: received =
edges received before it plus later ones with a tick at or before its tick. `captured - dropped -
received` growing is a LOST_EDGES incident (lost on the link); `dropped` growing is an OVERFLOW incident
(lost in the sampler's own buffer). In the first epoch the first beat sets the baseline (the host may have
joined mid-run); after a reset the counts start from zero.
"""

from __future__ import annotations

import numpy as np

from benchlog._slotted import Slotted
from benchlog.clock._convert import NS_PER_S, signed_deltas, ticks_to_ns, ticks_to_ns_array
from benchlog.clock._drift import DriftEstimator
from benchlog.errors import ConfigError
from benchlog.events import (
    CLOCK,
    DECODE_FAULT,
    DISCONNECT,
    LOST_EDGES,
    OVERFLOW,
    RESET,
    SEQUENCE_GAP,
    Incident,
    TimedDrives,
    TimedEdges,
)
from benchlog.wire import (
    BLOCK_BEAT,
    PROTOCOL_VERSION,
    Announce,
    Beat,
    Block,
    Drive,
    Edges,
    Fault,
    GoAccepted,
    Notice,
    PlanAccepted,
    Pong,
    Record,
    SequenceGap,
)

HOST_RATE_MARGIN = 0.02  # a sampler clock may be 0.5 % off; allow four times that
HOST_SLACK_NS = NS_PER_S  # latency jitter between two receive times
SOLICITED_FOR_NS = 5 * NS_PER_S
MAX_HELD_EDGES = 1 << 20
REPLAY_STEP_NS = 250_000_000
REPLAY_TAIL_ROWS = 1 << 20
U32 = 1 << 32
EPOCH_LIMIT_NS = 1 << 60  # 36 years: no counter epoch is longer; beyond it a tick is garbage
RUN_LIMIT_NS = 1 << 61  # run time stays far inside int64


class TimedBeats(Slotted, frozen=True, eq=False):
    """Beats in run time: `t_ns`, `host_ns`, `captured`, `dropped` (all int64 arrays)."""

    __slots__ = ("t_ns", "host_ns", "captured", "dropped")
    t_ns: np.ndarray
    host_ns: np.ndarray
    captured: np.ndarray
    dropped: np.ndarray

    def __init__(
        self, t_ns: np.ndarray, host_ns: np.ndarray, captured: np.ndarray, dropped: np.ndarray
    ) -> None:
        _set = object.__setattr__
        _set(self, "t_ns", t_ns)
        _set(self, "host_ns", host_ns)
        _set(self, "captured", captured)
        _set(self, "dropped", dropped)

    def __len__(self) -> int:
        return len(self.t_ns)

    @classmethod
    def of(cls, rows: list[tuple[int, int, int, int]]) -> TimedBeats:
        a = np.asarray(rows, np.int64).reshape(-1, 4)
        return cls(a[:, 0].copy(), a[:, 1].copy(), a[:, 2].copy(), a[:, 3].copy())


class TimedNotice(Slotted, frozen=True):
    __slots__ = ("t_ns", "host_ns", "text")
    t_ns: int
    host_ns: int
    text: str

    def __init__(self, t_ns: int, host_ns: int, text: str) -> None:
        _set = object.__setattr__
        _set(self, "t_ns", t_ns)
        _set(self, "host_ns", host_ns)
        _set(self, "text", text)


class TimedPong(Slotted, frozen=True):
    __slots__ = ("t_ns", "host_ns", "token")
    t_ns: int
    host_ns: int
    token: int

    def __init__(self, t_ns: int, host_ns: int, token: int) -> None:
        _set = object.__setattr__
        _set(self, "t_ns", t_ns)
        _set(self, "host_ns", host_ns)
        _set(self, "token", token)


class Timed(Slotted, frozen=True, eq=False):
    """What one `Timeline.push` made of its records. `counts`: protocol version 2 beats' counts;
    `accepted`: PLAN and GO acknowledged (version 2)."""

    __slots__ = (
        "edges",
        "drives",
        "incidents",
        "announcements",
        "beats",
        "notices",
        "pongs",
        "counts",
        "accepted",
    )
    edges: TimedEdges
    drives: TimedDrives
    incidents: list[Incident]
    announcements: list[Announce]
    beats: TimedBeats
    notices: list[TimedNotice]
    pongs: list[TimedPong]
    counts: list[TimedCounts]
    accepted: list[TimedAccepted]

    def __init__(
        self,
        edges: TimedEdges,
        drives: TimedDrives,
        incidents: list[Incident],
        announcements: list[Announce],
        beats: TimedBeats,
        notices: list[TimedNotice] | None = None,
        pongs: list[TimedPong] | None = None,
        counts: list[TimedCounts] | None = None,
        accepted: list[TimedAccepted] | None = None,
    ) -> None:
        _set = object.__setattr__
        _set(self, "edges", edges)
        _set(self, "drives", drives)
        _set(self, "incidents", incidents)
        _set(self, "announcements", announcements)
        _set(self, "beats", beats)
        _set(self, "notices", [] if notices is None else notices)
        _set(self, "pongs", [] if pongs is None else pongs)
        _set(self, "counts", [] if counts is None else counts)
        _set(self, "accepted", [] if accepted is None else accepted)


class TimedCounts(Slotted, frozen=True):
    """A version 2 beat's counts: (channel, cycles completed since its plan started) pairs, and pulses
    too short to resolve since the sampler's reset."""

    __slots__ = ("t_ns", "host_ns", "cycles", "short")
    t_ns: int
    host_ns: int
    cycles: tuple[tuple[int, int], ...]
    short: int

    def __init__(self, t_ns: int, host_ns: int, cycles: tuple[tuple[int, int], ...], short: int) -> None:
        _set = object.__setattr__
        _set(self, "t_ns", t_ns)
        _set(self, "host_ns", host_ns)
        _set(self, "cycles", cycles)
        _set(self, "short", short)


class TimedAccepted(Slotted, frozen=True):
    """A `PlanAccepted` or `GoAccepted` record, placed in run time."""

    __slots__ = ("t_ns", "host_ns", "record")
    t_ns: int
    host_ns: int
    record: PlanAccepted | GoAccepted

    def __init__(self, t_ns: int, host_ns: int, record: PlanAccepted | GoAccepted) -> None:
        _set = object.__setattr__
        _set(self, "t_ns", t_ns)
        _set(self, "host_ns", host_ns)
        _set(self, "record", record)


_EDGE, _DRIVE, _BEAT = 0, 1, 2


def empty_timed() -> Timed:
    return Timed(TimedEdges.empty(), TimedDrives.empty(), [], [], TimedBeats.of([]), [], [])


def merge_timed(parts: list[Timed]) -> Timed:
    """One `Timed` from several, in order."""
    parts = [p for p in parts if p is not None]
    if not parts:
        return empty_timed()
    if len(parts) == 1:
        return parts[0]
    drives = [p.drives for p in parts if len(p.drives)]
    beats = [p.beats for p in parts if len(p.beats)]
    with_cycles = any(d.cycle is not None for d in drives)
    return Timed(
        TimedEdges.concat([p.edges for p in parts if len(p.edges)]),
        TimedDrives(
            np.concatenate([d.t_ns for d in drives]),
            np.concatenate([d.channel for d in drives]),
            np.concatenate([d.level for d in drives]),
            np.concatenate([np.full(len(d), -1, np.int64) if d.cycle is None else d.cycle for d in drives])
            if with_cycles
            else None,
        )
        if drives
        else TimedDrives.empty(),
        [i for p in parts for i in p.incidents],
        [a for p in parts for a in p.announcements],
        TimedBeats(
            np.concatenate([b.t_ns for b in beats]),
            np.concatenate([b.host_ns for b in beats]),
            np.concatenate([b.captured for b in beats]),
            np.concatenate([b.dropped for b in beats]),
        )
        if beats
        else TimedBeats.of([]),
        [n for p in parts for n in p.notices],
        [q for p in parts for q in p.pongs],
        [c for p in parts for c in p.counts],
        [a for p in parts for a in p.accepted],
    )


class _Faults:
    """Adjacent decode faults (no good record between them): one DECODE_FAULT incident."""

    def __init__(self, first: Fault) -> None:
        self.by_reason: dict[str, list[int]] = {}
        self.add(first)

    def add(self, rec: Fault) -> None:
        entry = self.by_reason.setdefault(rec.reason, [0, 0])
        entry[0] += rec.units
        entry[1] += rec.nbytes

    def detail(self) -> str:
        return ", ".join(f"{u} x {r} ({b} bytes)" for r, (u, b) in sorted(self.by_reason.items()))


class _Segment:
    """The tick-bearing records of a push between announcements, gathered for one vectorised pass.

    Edge batches and blocks are kept as arrays and single records (drives, beats) as Python lists with
    their positions; `arrays` lays both out in stream order with two fancy-index assignments. `group`
    counts the beats added so far (a replay's host clock moves on after each).
    """

    __slots__ = (
        "ticks",
        "channels",
        "levels",
        "kinds",
        "pos",
        "one_tick",
        "one_kind",
        "one_ch",
        "one_lv",
        "beat_pos",
        "beat_cap",
        "beat_drop",
        "cycles",
        "one_cycles",
        "markers",
        "marker_group",
        "n",
        "group",
        "has_kinds",
    )

    def __init__(self) -> None:
        self.ticks: list[np.ndarray] = []
        self.channels: list[np.ndarray] = []
        self.levels: list[np.ndarray] = []
        self.kinds: list[np.ndarray | None] = []  # None: all edges
        self.pos: list[int] = []  # positions of single records
        self.one_tick: list[int] = []
        self.one_kind: list[int] = []
        self.one_ch: list[int] = []
        self.one_lv: list[int] = []
        self.beat_pos: list[np.ndarray | list[int]] = [[]]  # beats' positions, captured and dropped
        self.beat_cap: list[np.ndarray | list[int]] = [[]]
        self.beat_drop: list[np.ndarray | list[int]] = [[]]
        self.cycles: list[np.ndarray | list[int]] = [[]]  # the sampler's cycle of each drive (-1: none)
        self.markers: list[tuple[int, Record | _Faults]] = []  # (position, record) of records without a tick
        self.marker_group: list[int] = []
        self.n = 0
        self.group = 0
        self.has_kinds = False

    def add_edges(self, rec: Edges) -> None:
        self.ticks.append(rec.tick)
        self.channels.append(rec.channel)
        self.levels.append(rec.level)
        self.kinds.append(None)
        self.n += len(rec.tick)

    def add_block(self, rec: Block) -> None:
        self.ticks.append(rec.tick)
        self.channels.append(rec.channel)
        self.levels.append(rec.level)
        self.kinds.append(rec.kind)
        self.has_kinds = True
        if len(rec.captured):
            at = self.n + np.flatnonzero(rec.kind == BLOCK_BEAT)
            for dst, src in (
                (self.beat_pos, at),
                (self.beat_cap, rec.captured),
                (self.beat_drop, rec.dropped),
            ):
                dst.append(np.asarray(src, np.int64))
                dst.append([])
            self.group += len(at)
        if len(rec.cycle):
            self.cycles.append(np.asarray(rec.cycle, np.int64))
            self.cycles.append([])
        self.n += len(rec.tick)

    def add_one(self, kind: int, tick: int, channel: int, level: int) -> None:
        self.pos.append(self.n)
        self.one_tick.append(tick & 0xFFFFFFFFFFFFFFFF)
        self.one_kind.append(kind)
        self.one_ch.append(channel)
        self.one_lv.append(level)
        self.n += 1

    def add_drive(self, rec: Drive) -> None:
        self.cycles[-1].append(-1 if rec.cycle is None else rec.cycle)  # type: ignore[union-attr]
        self.add_one(_DRIVE, rec.tick, rec.channel, rec.level)

    def add_beat(self, rec: Beat) -> None:
        self.beat_pos[-1].append(self.n)  # type: ignore[union-attr]
        self.beat_cap[-1].append(rec.captured)  # type: ignore[union-attr]
        self.beat_drop[-1].append(rec.dropped)  # type: ignore[union-attr]
        self.add_one(_BEAT, rec.tick, 0, 0)
        if rec.short is not None:
            self.mark(rec)  # placed at the beat's own run time
        self.group += 1

    def mark(self, rec: Record | _Faults) -> None:
        self.markers.append((self.n, rec))
        self.marker_group.append(self.group)

    def beats(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(position, captured, dropped) of every beat, in order."""
        return tuple(_join(parts) for parts in (self.beat_pos, self.beat_cap, self.beat_drop))  # type: ignore[return-value]

    def drive_cycles(self) -> np.ndarray:
        return _join(self.cycles)

    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        n = self.n
        if not self.ticks:
            z = np.zeros(0, np.uint8)
            chunk = (np.zeros(0, np.uint64), z, z, z)
        else:
            tick = np.concatenate(self.ticks).astype(np.uint64, copy=False)  # new: it is masked in place
            if self.has_kinds:
                kinds = [
                    np.zeros(len(t), np.uint8) if k is None else k
                    for k, t in zip(self.kinds, self.ticks, strict=True)
                ]
                kind = np.concatenate(kinds).astype(np.uint8, copy=False)
            else:
                kind = np.zeros(len(tick), np.uint8)
            chunk = (tick, kind, np.concatenate(self.channels), np.concatenate(self.levels))
        if not self.pos:
            return chunk
        tick = np.empty(n, np.uint64)
        kind = np.zeros(n, np.uint8)
        channel = np.empty(n, np.uint8)
        level = np.empty(n, np.uint8)
        pos = np.asarray(self.pos, np.intp)
        tick[pos] = np.asarray(self.one_tick, np.uint64)
        kind[pos] = self.one_kind
        channel[pos] = self.one_ch
        level[pos] = self.one_lv
        if self.ticks:
            rest = np.ones(n, bool)
            rest[pos] = False
            tick[rest], kind[rest], channel[rest], level[rest] = chunk
        return tick, kind, channel, level


def _join(parts: list) -> np.ndarray:
    arrays = [np.asarray(p, np.int64) for p in parts if len(p)]
    if not arrays:
        return np.zeros(0, np.int64)
    return arrays[0] if len(arrays) == 1 else np.concatenate(arrays)


class _PendingBeat(Slotted):
    __slots__ = ("rel", "t_ns", "host_ns", "captured", "dropped", "received_before", "late")
    rel: int
    t_ns: int
    host_ns: int
    captured: int
    dropped: int
    received_before: int
    late: int

    def __init__(
        self,
        rel: int,
        t_ns: int,
        host_ns: int,
        captured: int,
        dropped: int,
        received_before: int,
        late: int = 0,
    ) -> None:
        self.rel = rel
        self.t_ns = t_ns
        self.host_ns = host_ns
        self.captured = captured
        self.dropped = dropped
        self.received_before = received_before
        self.late = late


class Timeline:
    """Unwraps, converts and bridges one bench's sampler time; see the module docstring.

    `clock_hz` and `counter_bits` are used until an announcement gives them; without either, records with
    ticks wait (up to about a million edges) for the first announcement. `time_scale` is how many sampler
    seconds pass per host second: 1 for a board, N for a simulated sampler running N times faster.
    `host_slack_ns`: the jitter of the receive times given to `push`, in their own units (a caller that
    scales host time itself for a fast simulated sampler scales this by as much); a tick that arrives
    more than this (and the clock-rate margin) earlier than any before it means a restarted counter.
    """

    def __init__(
        self,
        clock_hz: int | None = None,
        counter_bits: int | None = None,
        *,
        time_scale: float = 1.0,
        host_slack_ns: int = HOST_SLACK_NS,
    ) -> None:
        if not time_scale > 0:
            raise ConfigError(f"time scale must be positive, not {time_scale}")
        self.time_scale = time_scale
        self.host_slack_ns = int(host_slack_ns)
        self.clock_hz = clock_hz
        self.counter_bits = counter_bits
        self.announcement: Announce | None = None
        self.resets = 0
        self._started = False  # an epoch exists
        self._last_raw = 0
        self._last_rel = 0
        self._hi_rel = 0
        self._hi_host = 0
        self._ns0 = 0
        self._run_hi_ns = 0  # latest run time placed (monotonic across epochs)
        self._host_last = 0
        self._first_epoch = True
        self._received = 0
        self._beat: _PendingBeat | None = None
        self._base_link_lost: int | None = None
        self._base_dropped: int | None = None
        self._reset_pending: str | None = None
        self._reset_from_host = 0
        self._solicited_until: int | None = None
        self._outage_hint: int | None = None  # host ns elapsed to use for the first tick after an outage
        self._disconnected = False
        self._min_offset: int | None = None  # least (host_ns - t_ns) of earlier pushes in this epoch
        self._min_offset_t = 0
        self._push_min: tuple[int, int] | None = None  # (offset, t_ns) least in the current push
        self._queued: list[Incident] = []
        self._held: list[tuple[list[Record], int]] = []
        self._held_edges = 0
        self._drift = DriftEstimator()
        # output being built by the current push
        self._e_t: list[np.ndarray] = []
        self._e_ch: list[np.ndarray] = []
        self._e_lv: list[np.ndarray] = []
        self._d_t: list[np.ndarray] = []
        self._d_ch: list[np.ndarray] = []
        self._d_lv: list[np.ndarray] = []
        self._d_cy: list[np.ndarray] = []
        self._counts: list[TimedCounts] = []
        self._accepted: list[TimedAccepted] = []
        self._beats: list[np.ndarray] = []  # (t_ns, host_ns, captured, dropped) rows
        self._incidents: list[Incident] = []
        self._announcements: list[Announce] = []
        self._notices: list[TimedNotice] = []
        self._pongs: list[TimedPong] = []
        self._prev_beat: _PendingBeat | None = None
        self._epoch_start_ns = 0
        self._epoch_start_host = 0
        self._replay_host = 0  # a replay's host clock (see `replay`)
        self._replay_tail: list[Record] = []

    # -- public -------------------------------------------------------------------------------------------

    @property
    def clock_error_ppm(self) -> float | None:
        """Sampler clock error against the host clock in ppm (positive = fast), None until enough beats."""
        return self._drift.ppm()

    @property
    def run_ns(self) -> int:
        """The latest run time placed so far."""
        return self._run_hi_ns

    def expect_announcement(self, host_ns: int) -> None:
        """The host just sent WHO: an unchanged announcement in the next 5 s is no reset by itself."""
        self._solicited_until = host_ns + SOLICITED_FOR_NS

    def note_disconnect(self, host_start_ns: int, host_end_ns: int) -> Incident:
        """Turn a port outage into a DISCONNECT incident (returned, and delivered by the next `push`)."""
        start = self._run_at_host(host_start_ns)
        end = start + self._scaled(max(0, host_end_ns - host_start_ns))
        inc = Incident(
            DISCONNECT,
            start,
            end,
            host_start_ns,
            host_end_ns,
            detail=f"port lost for {(host_end_ns - host_start_ns) / NS_PER_S:.3f} s",
        )
        self._queued.append(inc)
        self._disconnected = True
        return inc

    def replay_step(self) -> int:
        """How far a replay's host clock moves on per beat: 250 ms, and less than a quarter wrap."""
        step = REPLAY_STEP_NS
        if self.clock_hz and self.counter_bits:
            quarter = (1 << (self.counter_bits - 2)) * NS_PER_S // self.clock_hz
            step = max(1, min(step, quarter - 1))
        return step

    def replay(self, records: list[Record]) -> Timed:
        """Place records of a recording, which carries no receive times (a capture file).

        The sampler's beats pace the host clock: the records up to each beat are one group, received
        `replay_step()` after the group before, as if pushed group by group (`push(group, host)`), and
        placed the same whatever the batches (see `_replay`: many groups go in one vectorised pass).
        Records after the last beat wait for the next call, or for `replay_end`."""
        from benchlog.clock._replay import replay_groups, split_after_last_beat

        records = self._replay_tail + list(records)
        done, tail = split_after_last_beat(records)
        if sum(len(r) for r in tail if isinstance(r, Edges | Block)) > REPLAY_TAIL_ROWS:
            done, tail = records, []  # no beat for a long while: do not hold on to it all
        self._replay_tail = tail
        return replay_groups(self, done)

    def replay_end(self) -> Timed:
        """The end of a recording: place the records after its last beat."""
        from benchlog.clock._replay import replay_groups

        tail, self._replay_tail = self._replay_tail, []
        return replay_groups(self, tail)

    def push(self, records: list[Record], host_ns: int) -> Timed:
        """Place `records` (decoded from bytes received at host time `host_ns`) in run time."""
        self._incidents = self._queued
        self._queued = []
        if not self._bits_known():
            first = next((r for r in records if isinstance(r, Announce)), None)
            if first is None:
                self._hold(records, host_ns)
                return self._collect()
            self.clock_hz, self.counter_bits = first.clock_hz, first.counter_bits
            held, self._held, self._held_edges = self._held, [], 0
            for rs, h in held:  # received before the announcement: placed at the host time they came
                self._process(rs, h)
        self._process(records, host_ns)
        return self._collect()

    def _process(self, records: list[Record], host_ns: int) -> None:
        if self._started:
            self._check_outage(host_ns)
        seg = _Segment()
        for rec in records:
            if isinstance(rec, Block):
                if len(rec):
                    seg.add_block(rec)
            elif isinstance(rec, Edges):
                if len(rec):
                    seg.add_edges(rec)
            elif isinstance(rec, Drive):
                seg.add_drive(rec)
            elif isinstance(rec, Beat):
                seg.add_beat(rec)
            elif isinstance(rec, PlanAccepted | GoAccepted):
                seg.mark(rec)
            elif isinstance(rec, Announce):
                self._place_segment(seg, host_ns)
                seg = _Segment()
                self._announcements.append(rec)
                self._on_announce(rec, host_ns)
            elif isinstance(rec, Fault):
                # where in the stream: damaged bytes held records timed between the good records
                # around them, so the incident spans that stretch (the analysis marks actuations
                # overlapping it incomplete: a lost edge must not read as bounce or chatter)
                last = seg.markers[-1] if seg.markers else None
                if last is not None and last[0] == seg.n and isinstance(last[1], _Faults):
                    last[1].add(rec)
                else:
                    seg.mark(_Faults(rec))
            elif isinstance(rec, SequenceGap | Notice | Pong):
                seg.mark(rec)
        self._place_segment(seg, host_ns)
        self._host_last = host_ns
        if self._push_min is not None:
            if self._min_offset is None or self._push_min[0] < self._min_offset:
                self._min_offset, self._min_offset_t = self._push_min
            self._push_min = None

    def _marker(self, rec: Record, t: int, host_ns: int) -> None:
        if isinstance(rec, SequenceGap):
            detail = (
                f"{rec.frames_lost} frame(s) lost (sequence {rec.expected} expected, {rec.received} received)"
            )
            self._incidents.append(
                Incident(SEQUENCE_GAP, t, t, self._host_last or host_ns, host_ns, detail=detail)
            )
        elif isinstance(rec, Notice):
            self._notices.append(TimedNotice(t, host_ns, rec.text))
        elif isinstance(rec, Pong):
            self._pongs.append(TimedPong(t, host_ns, rec.token))
        elif isinstance(rec, Beat):
            self._counts.append(TimedCounts(t, host_ns, rec.cycles, rec.short or 0))
        elif isinstance(rec, PlanAccepted | GoAccepted):
            self._accepted.append(TimedAccepted(t, host_ns, rec))

    # -- output -------------------------------------------------------------------------------------------

    def _collect(self) -> Timed:
        if self._e_t:
            edges = TimedEdges(
                np.concatenate(self._e_t), np.concatenate(self._e_ch), np.concatenate(self._e_lv)
            )
        else:
            edges = TimedEdges.empty()
        out = Timed(
            edges,
            TimedDrives(
                np.concatenate(self._d_t),
                np.concatenate(self._d_ch),
                np.concatenate(self._d_lv),
                np.concatenate(self._d_cy),
            )
            if self._d_t
            else TimedDrives.empty(),
            self._incidents,
            self._announcements,
            TimedBeats.of(np.concatenate(self._beats) if self._beats else []),
            self._notices,
            self._pongs,
            self._counts,
            self._accepted,
        )
        self._counts, self._accepted, self._d_cy = [], [], []
        self._e_t, self._e_ch, self._e_lv, self._beats = [], [], [], []
        self._d_t, self._d_ch, self._d_lv = [], [], []
        self._incidents, self._announcements, self._notices, self._pongs = [], [], [], []
        return out

    # -- state helpers ------------------------------------------------------------------------------------

    def _bits_known(self) -> bool:
        return self.clock_hz is not None and self.counter_bits is not None

    def _to_ns(self, rel: int) -> int:
        return self._ns0 + ticks_to_ns(rel, self.clock_hz)

    def _run_at_host(self, host_ns: int) -> int:
        if not self._started:
            return self._run_hi_ns
        return self._run_hi_ns + self._scaled(max(0, host_ns - self._hi_host))

    def _scaled(self, host_duration_ns: int) -> int:
        """A host-clock duration in sampler time."""
        if self.time_scale == 1.0:
            return host_duration_ns
        return min(int(host_duration_ns * self.time_scale), RUN_LIMIT_NS)

    def _back_tolerance(self) -> int:
        return min(1 << (self.counter_bits - 2), max(1, self.clock_hz // 10))

    def outage_bridged(self) -> None:
        """The records after the last outage follow those before it without a loss (the sampler's frame
        sequence continued): the beat every quarter wrap kept coming, so the plain unwrap places them
        and no wraps are counted from host time."""
        self._disconnected = False
        self._outage_hint = None

    def _check_outage(self, host_ns: int) -> None:
        """After a port outage longer than a quarter wrap, wraps may have passed unseen."""
        if not self._disconnected:
            return
        self._disconnected = False
        quarter_ns = ticks_to_ns(1 << (self.counter_bits - 2), self.clock_hz)
        if self._scaled(host_ns - self._hi_host) > quarter_ns:
            self._outage_hint = self._scaled(host_ns - self._hi_host)

    def _apply_outage(self, d: int, host_ns: int) -> int:
        """Add the whole wraps an outage may have hidden to the first delta after it."""
        elapsed_ns, self._outage_hint = self._outage_hint, None
        m = 1 << self.counter_bits
        expected = (elapsed_ns * self.clock_hz) // NS_PER_S
        wraps = max(0, round((expected - d) / m))
        if abs(d + wraps * m) >= 1 << 62:
            wraps = 0
        if wraps and self._reset_pending is None:
            period_s = m / self.clock_hz
            doubtful = period_s < 4.0
            self._incidents.append(
                Incident(
                    CLOCK,
                    self._run_hi_ns,
                    self._run_hi_ns + elapsed_ns,
                    self._hi_host,
                    host_ns,
                    detail=f"{wraps} counter wrap(s) of {period_s:.3f} s counted from host time across a "
                    f"{elapsed_ns / NS_PER_S:.1f} s silence"
                    + (" (doubtful: wrap shorter than 4 s)" if doubtful else ""),
                )
            )
        return d + wraps * m

    # -- epochs -------------------------------------------------------------------------------------------

    def _new_epoch(self, raw: int, host_ns: int, why: str) -> None:
        """Start a counter epoch at a record with raw tick `raw` (the counter restarted at 0)."""
        self._settle_beat()
        if ticks_to_ns(raw, self.clock_hz) > EPOCH_LIMIT_NS:
            raw_start = 0  # no restarted counter reads this high: count the epoch from this record
        else:
            raw_start = raw
        first_tick_ns = ticks_to_ns(raw_start, self.clock_hz)
        if self._started:
            last = self._run_hi_ns
            gap = self._scaled(max(0, host_ns - max(self._hi_host, self._reset_from_host)))
            self._ns0 = min(max(last, last + gap - first_tick_ns), RUN_LIMIT_NS)
            self.resets += 1
            self._incidents.append(
                Incident(
                    RESET,
                    last,
                    self._ns0 + first_tick_ns,
                    self._hi_host,
                    host_ns,
                    detail=f"sampler restarted ({why}); bridged with {gap / NS_PER_S:.3f} s of host time",
                )
            )
            self._first_epoch = False
            self._base_link_lost = 0
            self._base_dropped = 0
            self._prev_beat = None
            self._drift.clear()
            rel = raw_start
        else:
            self._ns0 = 0
            rel = 0
        self._started = True
        self._reset_pending = None
        self._outage_hint = None
        self._min_offset = None
        self._push_min = None
        self._last_raw = raw
        self._last_rel = self._hi_rel = rel
        self._hi_host = host_ns
        self._received = 0
        self._run_hi_ns = max(self._run_hi_ns, self._to_ns(rel))
        self._epoch_start_ns, self._epoch_start_host = self._to_ns(rel), host_ns

    def _on_announce(self, rec: Announce, host_ns: int) -> None:
        prev = self.announcement
        self.announcement = rec
        if not 1 <= rec.version <= PROTOCOL_VERSION:
            t = self._run_hi_ns
            self._incidents.append(
                Incident(
                    DECODE_FAULT,
                    t,
                    t,
                    host_ns,
                    host_ns,
                    detail=f"sampler speaks protocol version {rec.version}; this host knows "
                    f"1 to {PROTOCOL_VERSION} and decodes what it can",
                )
            )
        changed = prev is not None and (
            (prev.clock_hz, prev.counter_bits, prev.channels, prev.board_id)
            != (rec.clock_hz, rec.counter_bits, rec.channels, rec.board_id)
        )
        solicited = self._solicited_until is not None and host_ns <= self._solicited_until
        if solicited:
            self._solicited_until = None
        if self._started and (changed or not solicited):
            self._reset_pending = "new announcement" + (" with changed parameters" if changed else "")
            self._reset_from_host = self._hi_host
        self.clock_hz = rec.clock_hz
        self.counter_bits = rec.counter_bits

    # -- placing ticks ------------------------------------------------------------------------------------

    def _place_segment(self, seg: _Segment, host_ns: int) -> None:
        """Place every tick-bearing record of `seg` at once, epoch piece by epoch piece."""
        raw, kind, channel, level = seg.arrays()
        n = len(raw)
        run_before = self._run_hi_ns
        t_all = np.empty(n, np.int64)
        if self.counter_bits < 64:
            raw &= np.uint64((1 << self.counter_bits) - 1)
        beats, cycles = seg.beats(), seg.drive_cycles()
        beat_host = np.full(len(beats[0]), host_ns, np.int64)
        start = 0
        why: str | None = None
        while start < n:
            pos = start
            first = None
            if not self._started or self._reset_pending is not None or why is not None:
                self._new_epoch(int(raw[start]), host_ns, self._reset_pending or why or "")
                first = self._last_rel
                pos = start + 1
            end, rel, why = self._place_run(raw, pos, host_ns)
            if first is not None:
                rel = np.concatenate([np.array([first], np.int64), rel])
            if end > start:
                t_all[start:end] = self._ns0 + ticks_to_ns_array(rel, self.clock_hz)
                self._consume(start, end, rel, t_all, kind, channel, level, beats, cycles, beat_host)
            start = end
        if seg.markers:
            upto = np.maximum.accumulate(t_all) if n else t_all
            for p, rec in seg.markers:
                t = max(run_before, int(upto[p - 1])) if p else run_before
                if isinstance(rec, _Faults):
                    t_next = max(t, int(upto[p]) if p < n else self._run_hi_ns)
                    inc = Incident(DECODE_FAULT, t, t_next, host_ns, host_ns, detail=rec.detail())
                    self._incidents.append(inc)
                else:
                    self._marker(rec, t, host_ns)

    def _place_run(self, raw: np.ndarray, start: int, host_ns: int) -> tuple[int, np.ndarray, str | None]:
        """Unwrap raw[start:] up to (not including) the first tick that means a reset, and why it does."""
        if start >= len(raw):
            return start, np.zeros(0, np.int64), None
        d = signed_deltas(raw[start:], self._last_raw, self.counter_bits)
        if self._outage_hint is not None:
            d[0] = self._apply_outage(int(d[0]), host_ns)
        # a garbage tick far beyond any run length would overflow int64 ns: such a record starts an epoch
        rel_approx = self._last_rel + np.cumsum(d.astype(np.float64))
        too_far = np.abs(rel_approx) * (NS_PER_S / self.clock_hz) > EPOCH_LIMIT_NS
        if too_far.any():
            d[int(np.argmax(too_far)) :] = 0  # (never used: those records are cut off below)
        rel = self._last_rel + np.cumsum(d)
        hi = np.maximum.accumulate(np.maximum(rel, self._hi_rel))
        prior_hi = np.empty_like(hi)
        prior_hi[0] = self._hi_rel
        prior_hi[1:] = hi[:-1]
        back = rel < prior_hi - self._back_tolerance()
        t = self._ns0 + ticks_to_ns_array(rel, self.clock_hz)
        # receive time minus sampler time: latency (plus a constant), never less
        offset = self._scaled(host_ns - self._epoch_start_host) - t
        if self._min_offset is not None:
            # data cannot arrive before it was sampled: an offset well under the least seen in earlier
            # pushes means the sampler's time jumped ahead (backlogged chunks only raise offsets)
            # (the slack is host-clock jitter: in sampler time it scales with a simulated sampler's speed)
            drift = (HOST_RATE_MARGIN * np.maximum(t - self._min_offset_t, 0)).astype(np.int64)
            allowance = self._scaled(self.host_slack_ns) + drift
            ahead = offset < self._min_offset - allowance
        else:
            ahead = np.zeros(len(rel), bool)
        bad = back | ahead | too_far
        why = None
        stop = len(rel)
        if bad.any():
            stop = int(np.argmax(bad))
            if too_far[stop]:
                why = "a tick beyond any run length"
            else:
                why = "counter went back" if back[stop] else "counter ran ahead of the host clock"
        if stop == 0:
            return start, rel[:0], why
        rel = rel[:stop]
        j = int(np.argmin(offset[:stop]))
        if self._push_min is None or int(offset[j]) < self._push_min[0]:
            self._push_min = (int(offset[j]), int(t[j]))
        self._last_raw = int(raw[start + stop - 1])
        self._last_rel = int(rel[-1])
        top = int(hi[stop - 1])
        if top > self._hi_rel:
            self._hi_rel, self._hi_host = top, host_ns
            self._run_hi_ns = max(self._run_hi_ns, self._to_ns(top))
        return start + stop, rel, why

    def _consume(
        self,
        a: int,
        b: int,
        rel: np.ndarray,
        t_all: np.ndarray,
        kind: np.ndarray,
        channel: np.ndarray,
        level: np.ndarray,
        beats: tuple[np.ndarray, np.ndarray, np.ndarray],
        cycles: np.ndarray,
        beat_host: np.ndarray,
    ) -> list[int]:
        """Hand out records a..b of a segment, all in one epoch: edges, drives, and beats in order.

        `beats` are (position, captured, dropped) of the segment's beats, `beat_host` their host times,
        `cycles` the sampler's cycle of each of its drives. Returns, for each incident the beats gave,
        which of the segment's beats gave it."""
        k = kind[a:b]
        t = t_all[a:b]
        is_edge = k == _EDGE
        if is_edge.all():
            self._e_t.append(t)
            self._e_ch.append(channel[a:b])
            self._e_lv.append(level[a:b])
        else:
            # one index array taken from each column: several times quicker than the mask on each
            rows = np.flatnonzero(is_edge)
            self._e_t.append(t.take(rows))
            self._e_ch.append(channel[a:b].take(rows))
            self._e_lv.append(level[a:b].take(rows))
            drive_rows = np.flatnonzero(k == _DRIVE)
            if len(drive_rows):
                self._d_t.append(t.take(drive_rows))
                self._d_ch.append(channel[a:b].take(drive_rows))
                self._d_lv.append(level[a:b].take(drive_rows))
                first = int(np.count_nonzero(kind[:a] == _DRIVE))
                self._d_cy.append(cycles[first : first + len(drive_rows)])
        pos, captured, dropped = beats
        m0, m1 = int(np.searchsorted(pos, a)), int(np.searchsorted(pos, b))
        if m1 == m0:
            if self._beat is not None:
                self._beat.late += int(np.count_nonzero(is_edge & (rel <= self._beat.rel)))
            self._received += int(np.count_nonzero(is_edge))
            return []
        j = pos[m0:m1] - a
        nb = m1 - m0
        # Edges after a beat and before the next one count as received before it when their tick is at
        # or before its tick (in flight when it was sent); the beat pending from earlier takes those
        # before the first beat here.
        marks = np.zeros(len(k), np.intp)
        marks[j] = 1
        after = np.cumsum(marks)  # beats at or before each row (j: distinct rows, sorted)
        bound = np.empty(nb + 1, np.int64)
        bound[0] = self._beat.rel if self._beat is not None else np.iinfo(np.int64).min
        bound[1:] = rel[j]
        hit = is_edge & (rel <= bound[after])
        late = np.bincount(after.take(np.flatnonzero(hit)), minlength=nb + 1)
        edges_before = np.cumsum(is_edge)
        before = self._received + np.where(j > 0, edges_before[np.maximum(j - 1, 0)], 0)
        tb = t[j]
        host = beat_host[m0:m1]
        cap, drop = captured[m0:m1], dropped[m0:m1]
        self._beats.append(np.stack([tb, host, cap, drop], axis=1))
        if self.time_scale == 1.0:
            self._drift.add_many((host - self._epoch_start_host).tolist(), tb.tolist())
        else:
            for h, tt in zip(host.tolist(), tb.tolist(), strict=True):
                self._drift.add(self._scaled(h - self._epoch_start_host), tt)
        settle = [
            (b_.rel, b_.t_ns, b_.host_ns, b_.captured, b_.dropped, b_.received_before, b_.late + int(late[0]))
            for b_ in ([self._beat] if self._beat is not None else [])
        ]
        columns = [np.asarray(col, np.int64) for col in zip(*settle, strict=True)] if settle else None
        new = (rel[j], tb, host, cap, drop, before, late[1:])
        if columns is not None:
            both = [np.concatenate((old, cur[:-1])) for old, cur in zip(columns, new, strict=True)]
        else:
            both = [cur[:-1] for cur in new]
        self._beat = None
        settled_by = self._settle_many(*both[1:])
        self._beat = _PendingBeat(*(int(col[-1]) for col in new))
        self._received += int(edges_before[-1]) if len(edges_before) else 0
        # the i-th beat settled is settled by the next beat to arrive
        return [m0 + i + (0 if columns is not None else 1) for i in settled_by]

    # -- beats --------------------------------------------------------------------------------------------

    def _settle_beat(self) -> None:
        b, self._beat = self._beat, None
        if b is None:
            return
        one = [
            np.array([v], np.int64)
            for v in (b.t_ns, b.host_ns, b.captured, b.dropped, b.received_before, b.late)
        ]
        self._settle_many(*one)

    def _settle_many(
        self,
        t: np.ndarray,
        host: np.ndarray,
        captured: np.ndarray,
        dropped: np.ndarray,
        received_before: np.ndarray,
        late: np.ndarray,
    ) -> list[int]:
        """Settle beats in order (each knows every edge received before it): LOST_EDGES and OVERFLOW.
        Returns which beat (its index here) gave each incident."""
        if not len(t):
            return []
        received = (received_before + late) % U32
        link_lost = (captured - dropped - received) % U32
        # more received than sent: a count the sampler got wrong; no loss to report
        link_lost = np.where(link_lost >= U32 // 2, link_lost - U32, link_lost)
        i0 = 0
        if self._base_link_lost is None or self._base_dropped is None:
            self._base_link_lost, self._base_dropped = int(link_lost[0]), int(dropped[0])
            self._prev_beat = _PendingBeat(0, int(t[0]), int(host[0]), 0, 0, 0)
            i0 = 1
        if i0 == len(t):
            return []
        gave: list[int] = []
        ll, dr = link_lost[i0:], dropped[i0:]
        base = np.maximum.accumulate(np.concatenate(([self._base_link_lost], ll)))
        lost = ll - base[:-1]
        grown = (dr - np.concatenate(([self._base_dropped], dr[:-1]))) % U32
        prev = self._prev_beat
        t0 = np.concatenate(([prev.t_ns if prev is not None else self._epoch_start_ns], t[i0:-1]))
        h0 = np.concatenate(([prev.host_ns if prev is not None else self._epoch_start_host], host[i0:-1]))
        for i in np.flatnonzero((lost > 0) | (grown != 0)).tolist():
            t1, h1 = int(t[i0 + i]), int(host[i0 + i])
            gave += [i0 + i] * (int(lost[i] > 0) + int(grown[i] != 0))
            if lost[i] > 0:
                self._incidents.append(
                    Incident(
                        LOST_EDGES,
                        int(t0[i]),
                        t1,
                        int(h0[i]),
                        h1,
                        edges_lost=int(lost[i]),
                        detail="lost between sampler and host",
                    )
                )
            if grown[i]:
                self._incidents.append(
                    Incident(
                        OVERFLOW,
                        int(t0[i]),
                        t1,
                        int(h0[i]),
                        h1,
                        edges_lost=int(grown[i]),
                        detail="dropped by the sampler's full buffer",
                    )
                )
        self._base_link_lost = int(base[-1])
        self._base_dropped = int(dr[-1])
        self._prev_beat = _PendingBeat(0, int(t[-1]), int(host[-1]), 0, 0, 0)
        return gave

    # -- before the first announcement --------------------------------------------------------------------

    def _hold(self, records: list[Record], host_ns: int) -> None:
        """No clock known yet: keep the records (bounded) for the first announcement."""
        self._held.append((records, host_ns))
        self._held_edges += sum(len(r) for r in records if isinstance(r, Edges))
        while self._held_edges > MAX_HELD_EDGES and len(self._held) > 1:
            rs, h = self._held.pop(0)
            n = sum(len(r) for r in rs if isinstance(r, Edges))
            self._held_edges -= n
            detail = "no announcement yet: clock unknown, oldest edges given up"
            self._incidents.append(Incident(DECODE_FAULT, 0, 0, h, host_ns, edges_lost=n, detail=detail))
