"""A bench's live feed: link (bytes) + decoder (records) + timeline (run time, incidents).

The link's queue holds chunks and outages in arrival order. `poll` takes what is there, groups chunks
that arrived within `group_ns` of each other (one decode and one timeline push per group, stamped with
the group's last receive time), hands each outage to the timeline in its place, and returns one merged
`Timed`. Everything received is decoded; nothing is dropped on the host side.

`speed` is for a simulated sampler run faster than real time (`benchlog sim --speed N`): host receive
times are scaled by it before the timeline sees them (so its host-time plausibility checks and reset
bridging work in sampler time) and scaled back in what comes out.
"""

from __future__ import annotations

import threading
import time
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass, field, replace

import numpy as np

from benchlog.clock import Timed, TimedBeats, Timeline, empty_timed, merge_timed
from benchlog.clock._timeline import HOST_SLACK_NS
from benchlog.errors import ConfigError, PortError
from benchlog.link import Chunk, Link, Outage
from benchlog.wire import Command, Decoder, Go, Plan, SetForm, Who, encode_command

GREET_AFTER_S = 0.3  # data but no announcement for this long: ask for one
MIN_POLL_S = 0.02  # the shortest time between two polls that take what arrived (see `poll`)


@dataclass(slots=True)
class FeedCounters:
    """Running totals of one feed."""

    bytes_in: int = 0
    chunks: int = 0
    records: int = 0
    edges: int = 0
    drives: int = 0
    beats: int = 0
    decode_faults: int = 0
    fault_bytes: int = 0
    frames_lost: int = 0
    unknown: int = 0
    outages: int = 0
    resets: int = 0
    incidents: Counter[str] = field(default_factory=Counter)
    edges_lost: int = 0  # edges the incidents say were lost (link and sampler buffer)
    clock_error_ppm: float | None = None
    bytes_out: int = 0


class Feed:
    """Live timed records from a sampler at a pyserial URL. Use as a context manager.

    `poll(timeout)` returns the next `Timed` batch (possibly empty); `batches()` iterates them;
    `send(cmd)` writes a host command; `counters` has the running totals.
    """

    def __init__(
        self,
        url: str,
        *,
        speed: float = 1.0,
        wait_s: float = 0.0,
        baudrate: int = 115200,
        backoff_s: tuple[float, float] = (0.02, 1.0),
        group_ns: int = 2_000_000,
    ) -> None:
        if not speed > 0:
            raise ConfigError(f"speed must be > 0, got {speed}")
        self.url = url
        self.speed = float(speed)
        self.link = Link(url, baudrate=baudrate, wait_s=wait_s, backoff_s=backoff_s)
        self._asked_at = 0.0
        self._first_data_at: float | None = None
        self.decoder = Decoder()
        # host times reach the clock scaled by `speed`: so does the host's jitter
        self.timeline = Timeline(host_slack_ns=int(HOST_SLACK_NS * self.speed))
        self.group_ns = group_ns
        self._host0 = time.time_ns()
        self._counters = FeedCounters()
        self._lock = threading.Lock()
        self._polled_at = 0.0  # monotonic time the last poll took what had arrived

    # -- lifecycle ---------------------------------------------------------------------------------
    def __enter__(self) -> Feed:
        self.open()
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def open(self) -> None:
        self._host0 = time.time_ns()
        self.link.open()

    def close(self) -> None:
        self.link.close()

    def _greet(self) -> None:
        """Data but no announcement yet (a sampler already running is heard mid-stream, and pyserial
        discards what the port buffered before it opened): after a moment, ask for one, at most once a
        second."""
        now = time.monotonic()
        if self._first_data_at is None:
            self._first_data_at = now
        if (
            self.timeline.announcement is not None
            or now - self._first_data_at < GREET_AFTER_S  # a fresh sampler's own announcement may follow
            or now - self._asked_at < 1.0
            or not self.link.connected
        ):
            return
        self._asked_at = now
        self.timeline.expect_announcement(self._to_clock(time.time_ns()))
        try:
            self.link.write(encode_command(Who()))
        except PortError:
            pass

    # -- host time in the timeline's frame -----------------------------------------------------------
    def _to_clock(self, host_ns: int) -> int:
        if self.speed == 1.0:
            return host_ns
        return self._host0 + int((host_ns - self._host0) * self.speed)

    def _from_clock(self, host_ns: int) -> int:
        if self.speed == 1.0:
            return host_ns
        return self._host0 + int((host_ns - self._host0) / self.speed)

    def _unscale(self, timed: Timed) -> Timed:
        if self.speed == 1.0:
            return timed
        incidents = [
            i._replace(
                host_start_ns=self._from_clock(i.host_start_ns),
                host_end_ns=self._from_clock(i.host_end_ns),
            )
            for i in timed.incidents
        ]
        b = timed.beats
        host = self._host0 + ((b.host_ns - self._host0) / self.speed).astype(np.int64)
        return timed._replace(
            incidents=incidents,
            beats=TimedBeats(b.t_ns, host, b.captured, b.dropped),
            notices=[n._replace(host_ns=self._from_clock(n.host_ns)) for n in timed.notices],
            pongs=[p._replace(host_ns=self._from_clock(p.host_ns)) for p in timed.pongs],
        )

    # -- reading -----------------------------------------------------------------------------------
    def _push(self, data: list[bytes], host_ns: int) -> Timed:
        records = self.decoder.feed(b"".join(data))
        if self.decoder.sequence_kept:
            # the frames after the outage continue the sampler's sequence: none was lost, so neither
            # was a counter wrap, and the host's clock must not guess any
            self.decoder.sequence_kept = None
            self.timeline.outage_bridged()
        return self.timeline.push(records, self._to_clock(host_ns))

    def poll(self, timeout: float = 0.1) -> Timed:
        """Everything that arrived (waiting up to `timeout` for the first chunk), in run time.

        Polls come at most every MIN_POLL_S (within `timeout`): a sampler sends in small bursts (the
        reference firmware every 5 ms), and each poll's work has a fixed cost, so a reader polling as
        fast as bursts arrive spends its time on that cost. The link's reader thread keeps reading the
        port meanwhile; nothing waits in the port."""
        if timeout:
            rest = MIN_POLL_S - (time.monotonic() - self._polled_at)
            if rest > 0:
                time.sleep(min(rest, timeout))
                timeout = max(timeout - rest, 1e-6)
        items = self.link.drain(timeout)
        self._polled_at = time.monotonic()
        parts: list[Timed] = []
        group: list[bytes] = []
        group_t0 = group_last = 0
        with self._lock:
            for item in items:
                if isinstance(item, Chunk):
                    if group and item.host_ns - group_t0 > self.group_ns:
                        parts.append(self._push(group, group_last))
                        group = []
                    if not group:
                        group_t0 = item.host_ns
                    group.append(item.data)
                    group_last = item.host_ns
                    self._counters.chunks += 1
                    self._counters.bytes_in += len(item.data)
                elif isinstance(item, Outage):
                    if group:
                        parts.append(self._push(group, group_last))
                        group = []
                    self.decoder.outage()
                    self.timeline.note_disconnect(
                        self._to_clock(item.host_start_ns), self._to_clock(item.host_end_ns)
                    )
                    parts.append(self.timeline.push([], self._to_clock(item.host_end_ns)))
                    self._counters.outages += 1
            if group:
                parts.append(self._push(group, group_last))
            timed = self._unscale(merge_timed(parts))
            self._count(timed)
            if self._counters.bytes_in:
                self._greet()
        return timed

    def batches(self, timeout: float = 0.1, stop: threading.Event | None = None) -> Iterator[Timed]:
        """`poll` repeatedly, yielding non-empty batches, until `stop` is set (or forever)."""
        while stop is None or not stop.is_set():
            timed = self.poll(timeout)
            if (
                len(timed.edges)
                or len(timed.drives)
                or timed.incidents
                or timed.announcements
                or len(timed.beats)
            ):
                yield timed

    def _count(self, timed: Timed) -> None:
        c = self._counters
        d = self.decoder.counters
        c.records, c.decode_faults, c.fault_bytes = d.records, d.faults, d.fault_bytes
        c.frames_lost, c.unknown = d.frames_lost, d.unknown
        c.edges += len(timed.edges)
        c.drives += len(timed.drives)
        c.beats += len(timed.beats)
        for inc in timed.incidents:
            c.incidents[inc.kind] += 1
            if inc.edges_lost:
                c.edges_lost += inc.edges_lost
        c.resets = self.timeline.resets
        c.clock_error_ppm = self.timeline.clock_error_ppm
        c.bytes_out = self.link.bytes_out

    @property
    def counters(self) -> FeedCounters:
        with self._lock:
            c = self._counters
            return replace(c, incidents=Counter(c.incidents))

    @property
    def connected(self) -> bool:
        return self.link.connected

    # -- writing -----------------------------------------------------------------------------------
    def send(self, cmd: Command) -> None:
        """Write a host command (`PortError` while the port is down)."""
        if isinstance(cmd, Who):
            self.timeline.expect_announcement(self._to_clock(time.time_ns()))
        elif isinstance(cmd, SetForm):
            self.decoder.expect_form("line" if cmd.form == "L" else "packed")
        self.link.write(encode_command(cmd))

    def start_cycling(self, plans: list[Plan], form: str | None = None) -> None:
        """Send each plan, optionally the record form ("L" or "P"), then GO."""
        if form is not None:
            self.send(SetForm(form))  # type: ignore[arg-type]
        for plan in plans:
            self.send(plan)
        self.send(Go())


__all__ = ["Feed", "FeedCounters", "merge_timed", "empty_timed"]
