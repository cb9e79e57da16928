"""Typed records the decoder yields (and the encoders accept). See docs/protocol.md."""

from __future__ import annotations

import numpy as np

from benchlog._slotted import Slotted

PROTOCOL_VERSION = 2
KNOWN_VERSIONS = (1, 2)


class Announce(Slotted, frozen=True):
    __slots__ = ("version", "clock_hz", "counter_bits", "channels", "board_id")
    version: int
    clock_hz: int
    counter_bits: int
    channels: int
    board_id: str

    def __init__(self, version: int, clock_hz: int, counter_bits: int, channels: int, board_id: str) -> None:
        _set = object.__setattr__
        _set(self, "version", version)
        _set(self, "clock_hz", clock_hz)
        _set(self, "counter_bits", counter_bits)
        _set(self, "channels", channels)
        _set(self, "board_id", board_id)


class Edges(Slotted, frozen=True):
    """A batch of edges in stream order. Ticks are raw counter values (modulo 2**counter_bits).

    `channel` uint8, `level` uint8 (1 = contact closed), `tick` uint64, all the same length.
    """

    __slots__ = ("channel", "level", "tick")
    channel: np.ndarray
    level: np.ndarray
    tick: np.ndarray

    def __init__(self, channel: np.ndarray, level: np.ndarray, tick: np.ndarray) -> None:
        _set = object.__setattr__
        _set(self, "channel", channel)
        _set(self, "level", level)
        _set(self, "tick", tick)

    def __len__(self) -> int:
        return len(self.tick)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Edges):
            return NotImplemented
        return (
            np.array_equal(self.channel, other.channel)
            and np.array_equal(self.level, other.level)
            and np.array_equal(self.tick, other.tick)
        )

    @classmethod
    def of(cls, rows: list[tuple[int, int, int]]) -> Edges:
        """Build a batch from (channel, level, tick) rows; convenient in tests and examples."""
        if not rows:
            return cls(np.zeros(0, np.uint8), np.zeros(0, np.uint8), np.zeros(0, np.uint64))
        ch, lv, tk = zip(*rows, strict=True)
        return cls(np.asarray(ch, np.uint8), np.asarray(lv, np.uint8), np.asarray(tk, np.uint64))


class Drive(Slotted, frozen=True):
    """The sampler switched channel `channel`'s actuator. `cycle` (version 2) is the cycle of the
    channel's plan this switching belongs to, as the sampler counts it (1 = the first cycle after GO);
    None from a version 1 sampler."""

    __slots__ = ("channel", "level", "tick", "cycle")
    channel: int
    level: int
    tick: int
    cycle: int | None

    def __init__(self, channel: int, level: int, tick: int, cycle: int | None = None) -> None:
        _set = object.__setattr__
        _set(self, "channel", channel)
        _set(self, "level", level)
        _set(self, "tick", tick)
        _set(self, "cycle", cycle)


class Beat(Slotted, frozen=True):
    """`captured`/`dropped`: edges since reset. Version 2 adds `short` (pulses too short to resolve,
    since reset) and `cycles`: (channel, cycles completed since its plan started) for every channel with
    a plan since the last reset, in channel order. Counts are modulo 2**32."""

    __slots__ = ("tick", "captured", "dropped", "short", "cycles")
    tick: int
    captured: int
    dropped: int
    short: int | None
    cycles: tuple[tuple[int, int], ...]

    def __init__(
        self,
        tick: int,
        captured: int,
        dropped: int,
        short: int | None = None,
        cycles: tuple[tuple[int, int], ...] = (),
    ) -> None:
        _set = object.__setattr__
        _set(self, "tick", tick)
        _set(self, "captured", captured)
        _set(self, "dropped", dropped)
        _set(self, "short", short)
        _set(self, "cycles", cycles)


BLOCK_EDGE, BLOCK_DRIVE, BLOCK_BEAT = 0, 1, 2


class Block(Slotted, frozen=True, eq=False):
    """Consecutive edge, drive and (version 1) beat records in stream order, as columns: what
    `Decoder.feed(data, blocks=True)` gives instead of one object per drive and beat, for readers
    that take millions of records at once (a capture file). `expand` gives the records themselves.

    `kind` uint8 (BLOCK_EDGE, BLOCK_DRIVE, BLOCK_BEAT), `channel`, `level` uint8 (0 for a beat),
    `tick` uint64; `cycle` int64 per drive row in order (-1: the sampler did not say); `captured`,
    `dropped` int64 per beat row in order.
    """

    __slots__ = ("kind", "channel", "level", "tick", "cycle", "captured", "dropped")
    kind: np.ndarray
    channel: np.ndarray
    level: np.ndarray
    tick: np.ndarray
    cycle: np.ndarray
    captured: np.ndarray
    dropped: np.ndarray

    def __init__(
        self,
        kind: np.ndarray,
        channel: np.ndarray,
        level: np.ndarray,
        tick: np.ndarray,
        cycle: np.ndarray,
        captured: np.ndarray,
        dropped: np.ndarray,
    ) -> None:
        _set = object.__setattr__
        _set(self, "kind", kind)
        _set(self, "channel", channel)
        _set(self, "level", level)
        _set(self, "tick", tick)
        _set(self, "cycle", cycle)
        _set(self, "captured", captured)
        _set(self, "dropped", dropped)

    def __len__(self) -> int:
        return len(self.tick)

    def expand(self) -> list[Edges | Drive | Beat]:
        """The same records one by one: an `Edges` batch for each run of edges, a `Drive` or `Beat`
        object for each other row."""
        out: list[Edges | Drive | Beat] = []
        others = np.flatnonzero(self.kind != BLOCK_EDGE)
        if not len(others):
            return [Edges(self.channel, self.level, self.tick)] if len(self.tick) else []
        kinds = self.kind[others].tolist()
        chans = self.channel[others].tolist()
        levels = self.level[others].tolist()
        ticks = self.tick[others].tolist()
        cycles = iter(self.cycle.tolist())
        beats = iter(zip(self.captured.tolist(), self.dropped.tolist(), strict=True))
        prev = 0
        for j, k, c, lv, t in zip(others.tolist(), kinds, chans, levels, ticks, strict=True):
            if j > prev:
                out.append(Edges(self.channel[prev:j], self.level[prev:j], self.tick[prev:j]))
            if k == BLOCK_DRIVE:
                cy = next(cycles)
                out.append(Drive(c, lv, t, None if cy < 0 else cy))
            else:
                captured, dropped = next(beats)
                out.append(Beat(t, captured, dropped))
            prev = j + 1
        if prev < len(self.tick):
            out.append(Edges(self.channel[prev:], self.level[prev:], self.tick[prev:]))
        return out

    def split(self, at: int) -> tuple[Block, Block]:
        """The rows before `at` and the rows from `at` on."""
        n_drives = int(np.count_nonzero(self.kind[:at] == BLOCK_DRIVE))
        n_beats = int(np.count_nonzero(self.kind[:at] == BLOCK_BEAT))
        head = Block(
            self.kind[:at],
            self.channel[:at],
            self.level[:at],
            self.tick[:at],
            self.cycle[:n_drives],
            self.captured[:n_beats],
            self.dropped[:n_beats],
        )
        tail = Block(
            self.kind[at:],
            self.channel[at:],
            self.level[at:],
            self.tick[at:],
            self.cycle[n_drives:],
            self.captured[n_beats:],
            self.dropped[n_beats:],
        )
        return head, tail


class PlanAccepted(Slotted, frozen=True):
    """Version 2: the sampler took `PLAN` as these values (the cycle count it will run, 0 = no end)."""

    __slots__ = ("channel", "on_us", "off_us", "cycles")
    channel: int
    on_us: int
    off_us: int
    cycles: int

    def __init__(self, channel: int, on_us: int, off_us: int, cycles: int) -> None:
        _set = object.__setattr__
        _set(self, "channel", channel)
        _set(self, "on_us", on_us)
        _set(self, "off_us", off_us)
        _set(self, "cycles", cycles)


class GoAccepted(Slotted, frozen=True):
    """Version 2: `GO` started these channels (those with a plan, not already cycling) at `tick`."""

    __slots__ = ("channels", "tick")
    channels: tuple[int, ...]
    tick: int

    def __init__(self, channels: tuple[int, ...], tick: int) -> None:
        object.__setattr__(self, "channels", channels)
        object.__setattr__(self, "tick", tick)


class Notice(Slotted, frozen=True):
    __slots__ = ("text",)
    text: str

    def __init__(self, text: str) -> None:
        object.__setattr__(self, "text", text)


class Pong(Slotted, frozen=True):
    __slots__ = ("token",)
    token: int

    def __init__(self, token: int) -> None:
        object.__setattr__(self, "token", token)


class Unknown(Slotted, frozen=True):
    """A well-formed record of a type this host does not know (skipped and counted)."""

    __slots__ = ("type_code",)
    type_code: str

    def __init__(self, type_code: str) -> None:
        object.__setattr__(self, "type_code", type_code)


class Fault(Slotted, frozen=True):
    """Damaged input: `count` bytes or records that could not be decoded, and why. `units`: how many
    lines or frames (consecutive faults of one reason are merged)."""

    __slots__ = ("reason", "nbytes", "units")
    reason: str
    nbytes: int
    units: int

    def __init__(self, reason: str, nbytes: int = 0, units: int = 1) -> None:
        _set = object.__setattr__
        _set(self, "reason", reason)
        _set(self, "nbytes", nbytes)
        _set(self, "units", units)


class SequenceGap(Slotted, frozen=True):
    """Packed form only: `frames_lost` frames never arrived between two good frames."""

    __slots__ = ("expected", "received", "frames_lost")
    expected: int
    received: int
    frames_lost: int

    def __init__(self, expected: int, received: int, frames_lost: int) -> None:
        _set = object.__setattr__
        _set(self, "expected", expected)
        _set(self, "received", received)
        _set(self, "frames_lost", frames_lost)


Record = (
    Announce
    | Block
    | Edges
    | Drive
    | Beat
    | Notice
    | Pong
    | PlanAccepted
    | GoAccepted
    | Unknown
    | Fault
    | SequenceGap
)


class DecodeCounters(Slotted):
    """Running totals a decoder keeps; never reset by the decoder itself."""

    __slots__ = (
        "bytes_in",
        "records",
        "edges",
        "faults",
        "fault_bytes",
        "unknown",
        "frames_lost",
        "by_reason",
    )
    bytes_in: int
    records: int
    edges: int
    faults: int
    fault_bytes: int
    unknown: int
    frames_lost: int
    by_reason: dict[str, int]

    def __init__(
        self,
        bytes_in: int = 0,
        records: int = 0,
        edges: int = 0,
        faults: int = 0,
        fault_bytes: int = 0,
        unknown: int = 0,
        frames_lost: int = 0,
        by_reason: dict[str, int] | None = None,
    ) -> None:
        self.bytes_in = bytes_in
        self.records = records
        self.edges = edges
        self.faults = faults
        self.fault_bytes = fault_bytes
        self.unknown = unknown
        self.frames_lost = frames_lost
        self.by_reason = {} if by_reason is None else by_reason
