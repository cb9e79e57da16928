"""Typed records the decoder yields (and the encoders accept). See docs/protocol.md."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

PROTOCOL_VERSION = 2
KNOWN_VERSIONS = (1, 2)


@dataclass(frozen=True, slots=True)
class Announce:
    version: int
    clock_hz: int
    counter_bits: int
    channels: int
    board_id: str


@dataclass(frozen=True, slots=True, eq=False)
class Edges:
    """A batch of edges in stream order. Ticks are raw counter values (modulo 2**counter_bits).

    `channel` uint8, `level` uint8 (1 = contact closed), `tick` uint64, all the same length.
    """

    channel: np.ndarray
    level: np.ndarray
    tick: np.ndarray

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


@dataclass(frozen=True, slots=True)
class Drive:
    """The sampler switched channel `channel`'s actuator. `cycle` (version 2) is the cycle of the
    channel's plan this switching belongs to, as the sampler counts it (1 = the first cycle after GO);
    None from a version 1 sampler."""

    channel: int
    level: int
    tick: int
    cycle: int | None = None


@dataclass(frozen=True, slots=True)
class Beat:
    """`captured`/`dropped`: edges since reset. Version 2 adds `short` (pulses too short to resolve,
    since reset) and `cycles`: (channel, cycles completed since its plan started) for every channel with
    a plan since the last reset, in channel order. Counts are modulo 2**32."""

    tick: int
    captured: int
    dropped: int
    short: int | None = None
    cycles: tuple[tuple[int, int], ...] = ()


BLOCK_EDGE, BLOCK_DRIVE, BLOCK_BEAT = 0, 1, 2


@dataclass(frozen=True, slots=True, eq=False)
class Block:
    """Consecutive edge, drive and (version 1) beat records in stream order, as columns: what
    `Decoder.feed(data, blocks=True)` gives instead of one object per drive and beat, for readers
    that take millions of records at once (a capture file). `expand` gives the records themselves.

    `kind` uint8 (BLOCK_EDGE, BLOCK_DRIVE, BLOCK_BEAT), `channel`, `level` uint8 (0 for a beat),
    `tick` uint64; `cycle` int64 per drive row in order (-1: the sampler did not say); `captured`,
    `dropped` int64 per beat row in order.
    """

    kind: np.ndarray
    channel: np.ndarray
    level: np.ndarray
    tick: np.ndarray
    cycle: np.ndarray
    captured: np.ndarray
    dropped: np.ndarray

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


@dataclass(frozen=True, slots=True)
class PlanAccepted:
    """Version 2: the sampler took `PLAN` as these values (the cycle count it will run, 0 = no end)."""

    channel: int
    on_us: int
    off_us: int
    cycles: int


@dataclass(frozen=True, slots=True)
class GoAccepted:
    """Version 2: `GO` started these channels (those with a plan, not already cycling) at `tick`."""

    channels: tuple[int, ...]
    tick: int


@dataclass(frozen=True, slots=True)
class Notice:
    text: str


@dataclass(frozen=True, slots=True)
class Pong:
    token: int


@dataclass(frozen=True, slots=True)
class Unknown:
    """A well-formed record of a type this host does not know (skipped and counted)."""

    type_code: str


@dataclass(frozen=True, slots=True)
class Fault:
    """Damaged input: `count` bytes or records that could not be decoded, and why."""

    reason: str
    nbytes: int = 0
    units: int = 1  # how many lines or frames (consecutive faults of one reason are merged)


@dataclass(frozen=True, slots=True)
class SequenceGap:
    """Packed form only: `frames_lost` frames never arrived between two good frames."""

    expected: int
    received: int
    frames_lost: int


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


@dataclass(slots=True)
class DecodeCounters:
    """Running totals a decoder keeps; never reset by the decoder itself."""

    bytes_in: int = 0
    records: int = 0
    edges: int = 0
    faults: int = 0
    fault_bytes: int = 0
    unknown: int = 0
    frames_lost: int = 0
    by_reason: dict[str, int] = field(default_factory=dict)
