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
- a tick further ahead of the latest one than the host clock allows (host time elapsed * 1.02 + 1 s).
The new epoch's counter started at 0 at the reset, so its `rel` is the raw tick, and `epoch_ns0` is set
from the host time elapsed since the last record: never before the last run time, so run time stays
monotonic. A RESET incident spans the bridged stretch.

After an outage longer than a quarter wrap (the host saw nothing, so wraps may have been missed) the first
tick is placed by the host time elapsed: the whole number of wraps that brings the sampler's elapsed time
closest to the host's. Where the wrap period is under 4 s host jitter makes that count doubtful, and a
CLOCK incident says so.

Lost edges: each beat says how many edges the sampler captured and dropped since its reset. Edges still in
flight when a beat is sent arrive after it, so a beat is settled when the next beat arrives: received =
edges received before it plus later ones with a tick at or before its tick. `captured - dropped -
received` growing is a LOST_EDGES incident (lost on the link); `dropped` growing is an OVERFLOW incident
(lost in the sampler's own buffer). In the first epoch the first beat sets the baseline (the host may have
joined mid-run); after a reset the counts start from zero.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from benchlog.clock._convert import NS_PER_S, signed_delta, signed_deltas, ticks_to_ns, ticks_to_ns_array
from benchlog.clock._drift import DriftEstimator
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
    PROTOCOL_VERSION,
    Announce,
    Beat,
    Drive,
    Edges,
    Fault,
    Notice,
    Pong,
    Record,
    SequenceGap,
)

HOST_RATE_MARGIN = 0.02  # a sampler clock may be 0.5 % off; allow four times that
HOST_SLACK_NS = NS_PER_S  # latency jitter between two receive times
SOLICITED_FOR_NS = 5 * NS_PER_S
MAX_HELD_EDGES = 1 << 20
U32 = 1 << 32


@dataclass(frozen=True, slots=True, eq=False)
class TimedBeats:
    """Beats in run time: `t_ns`, `host_ns`, `captured`, `dropped` (all int64 arrays)."""

    t_ns: np.ndarray
    host_ns: np.ndarray
    captured: np.ndarray
    dropped: np.ndarray

    def __len__(self) -> int:
        return len(self.t_ns)

    @classmethod
    def of(cls, rows: list[tuple[int, int, int, int]]) -> TimedBeats:
        a = np.asarray(rows, np.int64).reshape(-1, 4)
        return cls(a[:, 0].copy(), a[:, 1].copy(), a[:, 2].copy(), a[:, 3].copy())


@dataclass(frozen=True, slots=True)
class TimedNotice:
    t_ns: int
    host_ns: int
    text: str


@dataclass(frozen=True, slots=True)
class TimedPong:
    t_ns: int
    host_ns: int
    token: int


@dataclass(frozen=True, slots=True, eq=False)
class Timed:
    """What one `Timeline.push` made of its records."""

    edges: TimedEdges
    drives: TimedDrives
    incidents: list[Incident]
    announcements: list[Announce]
    beats: TimedBeats
    notices: list[TimedNotice] = field(default_factory=list)
    pongs: list[TimedPong] = field(default_factory=list)


@dataclass(slots=True)
class _PendingBeat:
    rel: int
    t_ns: int
    host_ns: int
    captured: int
    dropped: int
    received_before: int
    late: int = 0


class Timeline:
    """Unwraps, converts and bridges one bench's sampler time; see the module docstring.

    `clock_hz` and `counter_bits` are used until an announcement gives them; without either, records with
    ticks wait (up to about a million edges) for the first announcement.
    """

    def __init__(self, clock_hz: int | None = None, counter_bits: int | None = None) -> None:
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
        self._queued: list[Incident] = []
        self._held: list[tuple[list[Record], int]] = []
        self._held_edges = 0
        self._drift = DriftEstimator()
        # output being built by the current push
        self._e_t: list[np.ndarray] = []
        self._e_ch: list[np.ndarray] = []
        self._e_lv: list[np.ndarray] = []
        self._drives: list[tuple[int, int, int]] = []
        self._beats: list[tuple[int, int, int, int]] = []
        self._incidents: list[Incident] = []
        self._announcements: list[Announce] = []
        self._notices: list[TimedNotice] = []
        self._pongs: list[TimedPong] = []
        self._prev_beat: _PendingBeat | None = None
        self._epoch_start_ns = 0
        self._epoch_start_host = 0

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
        end = start + max(0, host_end_ns - host_start_ns)
        inc = Incident(
            DISCONNECT,
            start,
            end,
            host_start_ns,
            host_end_ns,
            detail=f"port lost for {(host_end_ns - host_start_ns) / NS_PER_S:.3f} s",
        )
        self._queued.append(inc)
        return inc

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
        faults: dict[str, list[int]] = {}
        for rec in records:
            if isinstance(rec, Edges):
                if len(rec):
                    self._edges(rec, host_ns)
            elif isinstance(rec, Drive):
                rel = self._place_one(rec.tick, host_ns)
                self._drives.append((self._to_ns(rel), rec.channel, rec.level))
            elif isinstance(rec, Beat):
                self._on_beat(rec, host_ns)
            elif isinstance(rec, Announce):
                self._announcements.append(rec)
                self._on_announce(rec, host_ns)
            elif isinstance(rec, Fault):
                entry = faults.setdefault(rec.reason, [0, 0])
                entry[0] += rec.units
                entry[1] += rec.nbytes
            elif isinstance(rec, SequenceGap):
                t = self._run_hi_ns
                detail = (
                    f"{rec.frames_lost} frame(s) lost "
                    f"(sequence {rec.expected} expected, {rec.received} received)"
                )
                self._incidents.append(
                    Incident(SEQUENCE_GAP, t, t, self._host_last or host_ns, host_ns, detail=detail)
                )
            elif isinstance(rec, Notice):
                self._notices.append(TimedNotice(self._run_hi_ns, host_ns, rec.text))
            elif isinstance(rec, Pong):
                self._pongs.append(TimedPong(self._run_hi_ns, host_ns, rec.token))
        if faults:
            t = self._run_hi_ns
            detail = ", ".join(f"{u} x {r} ({b} bytes)" for r, (u, b) in sorted(faults.items()))
            self._incidents.append(Incident(DECODE_FAULT, t, t, host_ns, host_ns, detail=detail))
        self._host_last = host_ns

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
            TimedDrives.of(self._drives),
            self._incidents,
            self._announcements,
            TimedBeats.of(self._beats),
            self._notices,
            self._pongs,
        )
        self._e_t, self._e_ch, self._e_lv, self._drives, self._beats = [], [], [], [], []
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
        return self._run_hi_ns + max(0, host_ns - self._hi_host)

    def _back_tolerance(self) -> int:
        return min(1 << (self.counter_bits - 2), max(1, self.clock_hz // 10))

    def _ahead_limit(self, host_ns: int) -> int:
        """Most ticks a counter can have advanced past the epoch's latest since then, by the host clock."""
        elapsed = max(0, host_ns - self._hi_host)
        allowed_ns = int(elapsed * (1 + HOST_RATE_MARGIN)) + HOST_SLACK_NS
        return (allowed_ns * self.clock_hz) // NS_PER_S

    def _check_outage(self, host_ns: int) -> None:
        quarter_ns = ticks_to_ns(1 << (self.counter_bits - 2), self.clock_hz)
        if host_ns - self._hi_host > quarter_ns:
            self._outage_hint = host_ns - self._hi_host

    def _apply_outage(self, d: int, host_ns: int) -> int:
        """Add the whole wraps an outage may have hidden to the first delta after it."""
        elapsed_ns, self._outage_hint = self._outage_hint, None
        m = 1 << self.counter_bits
        expected = (elapsed_ns * self.clock_hz) // NS_PER_S
        wraps = max(0, round((expected - d) / m))
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
        first_tick_ns = ticks_to_ns(raw, self.clock_hz)
        if self._started:
            last = self._run_hi_ns
            gap = max(0, host_ns - max(self._hi_host, self._reset_from_host))
            self._ns0 = max(last, last + gap - first_tick_ns)
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
            rel = raw
        else:
            self._ns0 = 0
            rel = 0
        self._started = True
        self._reset_pending = None
        self._outage_hint = None
        self._last_raw = raw
        self._last_rel = self._hi_rel = rel
        self._hi_host = host_ns
        self._received = 0
        self._run_hi_ns = max(self._run_hi_ns, self._to_ns(rel))
        self._epoch_start_ns, self._epoch_start_host = self._to_ns(rel), host_ns

    def _on_announce(self, rec: Announce, host_ns: int) -> None:
        prev = self.announcement
        self.announcement = rec
        if rec.version != PROTOCOL_VERSION:
            t = self._run_hi_ns
            self._incidents.append(
                Incident(
                    DECODE_FAULT,
                    t,
                    t,
                    host_ns,
                    host_ns,
                    detail=f"sampler speaks protocol version {rec.version}; this host knows "
                    f"{PROTOCOL_VERSION} and decodes what it can",
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

    def _place_one(self, raw: int, host_ns: int) -> int:
        raw &= (1 << self.counter_bits) - 1
        if not self._started or self._reset_pending is not None:
            self._new_epoch(raw, host_ns, self._reset_pending or "")
            return self._last_rel
        d = signed_delta(raw, self._last_raw, self.counter_bits)
        if self._outage_hint is not None:
            d = self._apply_outage(d, host_ns)
        rel = self._last_rel + d
        if rel < self._hi_rel - self._back_tolerance():
            self._new_epoch(raw, host_ns, "counter went back")
            return self._last_rel
        if rel - self._hi_rel > self._ahead_limit(host_ns):
            self._new_epoch(raw, host_ns, "counter ran ahead of the host clock")
            return self._last_rel
        self._last_raw, self._last_rel = raw, rel
        if rel > self._hi_rel:
            self._hi_rel, self._hi_host = rel, host_ns
            self._run_hi_ns = max(self._run_hi_ns, self._to_ns(rel))
        return rel

    def _edges(self, rec: Edges, host_ns: int) -> None:
        raw = rec.tick.astype(np.uint64, copy=False)
        if self.counter_bits < 64:
            raw = raw & np.uint64((1 << self.counter_bits) - 1)
        start = 0
        n = len(raw)
        while start < n:
            if not self._started or self._reset_pending is not None:
                self._place_one(int(raw[start]), host_ns)
                rels = [np.array([self._last_rel], np.int64)]
                end = start + 1
                if end < n:
                    end, more = self._place_run(raw, end, host_ns)
                    rels.append(more)
                rel = np.concatenate(rels)
            else:
                end, rel = self._place_run(raw, start, host_ns)
                if end == start:  # raw[start] starts a new epoch
                    self._place_one(int(raw[start]), host_ns)
                    rel = np.array([self._last_rel], np.int64)
                    end = start + 1
            self._emit_edges(rel, rec.channel[start:end], rec.level[start:end])
            start = end

    def _place_run(self, raw: np.ndarray, start: int, host_ns: int) -> tuple[int, np.ndarray]:
        """Unwrap raw[start:] up to (not including) the first tick that means a reset."""
        d = signed_deltas(raw[start:], self._last_raw, self.counter_bits)
        if self._outage_hint is not None:
            d[0] = self._apply_outage(int(d[0]), host_ns)
        rel = self._last_rel + np.cumsum(d)
        hi = np.maximum.accumulate(np.maximum(rel, self._hi_rel))
        prior_hi = np.empty_like(hi)
        prior_hi[0] = self._hi_rel
        prior_hi[1:] = hi[:-1]
        bad = (rel < prior_hi - self._back_tolerance()) | (rel - self._hi_rel > self._ahead_limit(host_ns))
        stop = int(np.argmax(bad)) if bad.any() else len(rel)
        if stop == 0:
            return start, rel[:0]
        rel = rel[:stop]
        self._last_raw = int(raw[start + stop - 1])
        self._last_rel = int(rel[-1])
        top = int(hi[stop - 1])
        if top > self._hi_rel:
            self._hi_rel, self._hi_host = top, host_ns
            self._run_hi_ns = max(self._run_hi_ns, self._to_ns(top))
        return start + stop, rel

    def _emit_edges(self, rel: np.ndarray, channel: np.ndarray, level: np.ndarray) -> None:
        t = self._ns0 + ticks_to_ns_array(rel, self.clock_hz)
        self._e_t.append(t)
        self._e_ch.append(np.asarray(channel, np.uint8))
        self._e_lv.append(np.asarray(level, np.uint8))
        self._received += len(rel)
        if self._beat is not None:
            self._beat.late += int(np.count_nonzero(rel <= self._beat.rel))

    # -- beats --------------------------------------------------------------------------------------------

    def _on_beat(self, rec: Beat, host_ns: int) -> None:
        rel = self._place_one(rec.tick, host_ns)
        t = self._to_ns(rel)
        self._beats.append((t, host_ns, rec.captured, rec.dropped))
        self._drift.add(host_ns, t)
        self._settle_beat()
        self._beat = _PendingBeat(rel, t, host_ns, rec.captured, rec.dropped, self._received)

    def _settle_beat(self) -> None:
        b, self._beat = self._beat, None
        if b is None:
            return
        received = (b.received_before + b.late) % U32
        link_lost = (b.captured - b.dropped - received) % U32
        if link_lost >= U32 // 2:
            link_lost -= U32  # more received than sent: a count the sampler got wrong; no loss to report
        if self._base_link_lost is None or self._base_dropped is None:
            self._base_link_lost, self._base_dropped = link_lost, b.dropped
            self._prev_beat = b
            return
        prev = self._prev_beat
        t0, h0 = (
            (prev.t_ns, prev.host_ns) if prev is not None else (self._epoch_start_ns, self._epoch_start_host)
        )
        lost = link_lost - self._base_link_lost
        if lost > 0:
            self._incidents.append(
                Incident(
                    LOST_EDGES,
                    t0,
                    b.t_ns,
                    h0,
                    b.host_ns,
                    edges_lost=lost,
                    detail="lost between sampler and host",
                )
            )
        dropped = (b.dropped - self._base_dropped) % U32
        if dropped:
            self._incidents.append(
                Incident(
                    OVERFLOW,
                    t0,
                    b.t_ns,
                    h0,
                    b.host_ns,
                    edges_lost=dropped,
                    detail="dropped by the sampler's full buffer",
                )
            )
        self._base_link_lost = max(self._base_link_lost, link_lost)
        self._base_dropped = b.dropped
        self._prev_beat = b

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
