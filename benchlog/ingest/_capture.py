"""A capture file read as a port is read: bytes a sampler sent, saved by another logger or a remote PC.

`CaptureFeed(path)` has the shape of `Feed` (`open`, `poll`, `send`, `start_cycling`, `timeline`,
`connected`, `counters`), so the recorder takes it unchanged. Nothing is sent to a file: cycle
commands are dropped, and the announced clock and the drive records are used as recorded. A capture
carries no host times, so the sampler's beats pace the host clock (each group of records up to a
beat moves it on by at most a quarter of the counter's wrap and 250 ms), as in `benchlog analyze`.
The file is read at the speed of its path, a few MiB per `poll`; `ended` is set once it is used up.
"""

from __future__ import annotations

import threading

from benchlog.clock import Timed, Timeline
from benchlog.errors import ConfigError
from benchlog.ingest._feed import FeedCounters, empty_timed, merge_timed
from benchlog.wire import Beat, Decoder

__all__ = ["CaptureFeed"]

READ_BYTES = 4 << 20


class CaptureFeed:
    def __init__(self, path: str, *, read_bytes: int = READ_BYTES) -> None:
        self.path = path
        self.read_bytes = read_bytes
        self.decoder = Decoder()
        self.timeline = Timeline()
        self.connected = True
        self.ended = threading.Event()
        self._fh = None
        self._host = 0
        self._bytes = 0

    def __enter__(self) -> CaptureFeed:
        self.open()
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def open(self) -> None:
        try:
            self._fh = open(self.path, "rb")  # noqa: SIM115 (closed by close())
        except OSError as exc:
            raise ConfigError(f"{self.path}: cannot read ({exc.strerror or exc})") from exc

    def close(self) -> None:
        if self._fh is not None:
            self._fh.close()
            self._fh = None

    def send(self, command) -> None:
        """A capture cannot be commanded: dropped."""

    def start_cycling(self, plans) -> None:
        """The capture already holds whatever cycling was done: nothing is sent."""

    @property
    def counters(self) -> FeedCounters:
        c = self.decoder.counters
        return FeedCounters(bytes_in=self._bytes, records=c.records, edges=c.edges, decode_faults=c.faults)

    def _step(self) -> int:
        step = 250_000_000
        tl = self.timeline
        if tl.clock_hz and tl.counter_bits:
            quarter = (1 << (tl.counter_bits - 2)) * 1_000_000_000 // tl.clock_hz
            step = max(1, min(step, quarter - 1))
        return step

    def _push(self, records: list) -> Timed:
        self._host += self._step()
        return self.timeline.push(records, self._host)

    def poll(self, timeout: float = 0.0) -> Timed:
        """The next piece of the file, in run time (empty once the file is used up)."""
        if self._fh is None or self.ended.is_set():
            return empty_timed()
        try:
            data = self._fh.read(self.read_bytes)
        except OSError as exc:
            raise ConfigError(f"{self.path}: read failed ({exc.strerror or exc})") from exc
        if not data:
            self.ended.set()
            return empty_timed()
        self._bytes += len(data)
        parts: list[Timed] = []
        group: list = []
        for rec in self.decoder.feed(data):
            group.append(rec)
            if isinstance(rec, Beat):
                parts.append(self._push(group))
                group = []
        if group:
            parts.append(self._push(group))
        return merge_timed(parts)
