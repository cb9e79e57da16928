"""Time-resolved data that flows from the clock stage up to analysis, store and views.

This module sits at the bottom of the package (it imports only numpy) so that every stage can share
these shapes. Times are integer nanoseconds:

- `t_ns` is *run time*: sampler ticks unwrapped and converted to ns, monotonic across counter wraps and
  across sampler resets (the clock stage bridges a reset with the host clock and reports it as an
  incident), starting near zero at the first record of a run.
- `host_ns` is the host's wall clock (`time.time_ns()`) when the bytes were received.
"""

from __future__ import annotations

import numpy as np

from benchlog._slotted import Slotted

# Incident kinds (docs/protocol.md and DESIGN: disconnect, reset, decode fault, sequence gap, overflow).
DISCONNECT = "disconnect"
RESET = "reset"
DECODE_FAULT = "decode_fault"
SEQUENCE_GAP = "sequence_gap"
OVERFLOW = "overflow"
LOST_EDGES = "lost_edges"
CLOCK = "clock"
CYCLES_NOT_OBSERVED = "cycles_not_observed"  # the sampler did cycles the host has no record of
# the user's --on-event command failed on an event (not found, non-zero exit, timed out, queue full): the
# data is whole, the telling was not
EVENT_COMMAND = "event_command"
INCIDENT_KINDS = (
    DISCONNECT,
    RESET,
    DECODE_FAULT,
    SEQUENCE_GAP,
    OVERFLOW,
    LOST_EDGES,
    CLOCK,
    CYCLES_NOT_OBSERVED,
    EVENT_COMMAND,
)


class TimedEdges(Slotted, frozen=True, eq=False):
    """Edges in run time. `t_ns` int64 (non-decreasing per channel), `channel` uint8, `level` uint8."""

    __slots__ = ("t_ns", "channel", "level")
    t_ns: np.ndarray
    channel: np.ndarray
    level: np.ndarray

    def __init__(self, t_ns: np.ndarray, channel: np.ndarray, level: np.ndarray) -> None:
        _set = object.__setattr__
        _set(self, "t_ns", t_ns)
        _set(self, "channel", channel)
        _set(self, "level", level)

    def __len__(self) -> int:
        return len(self.t_ns)

    @classmethod
    def empty(cls) -> TimedEdges:
        return cls(np.zeros(0, np.int64), np.zeros(0, np.uint8), np.zeros(0, np.uint8))

    @classmethod
    def of(cls, rows: list[tuple[int, int, int]]) -> TimedEdges:
        """From (t_ns, channel, level) rows."""
        if not rows:
            return cls.empty()
        t, ch, lv = zip(*rows, strict=True)
        return cls(np.asarray(t, np.int64), np.asarray(ch, np.uint8), np.asarray(lv, np.uint8))

    def select(self, mask: np.ndarray) -> TimedEdges:
        return TimedEdges(self.t_ns[mask], self.channel[mask], self.level[mask])

    @staticmethod
    def concat(parts: list[TimedEdges]) -> TimedEdges:
        if not parts:
            return TimedEdges.empty()
        return TimedEdges(
            np.concatenate([p.t_ns for p in parts]),
            np.concatenate([p.channel for p in parts]),
            np.concatenate([p.level for p in parts]),
        )


class TimedDrives(Slotted, frozen=True, eq=False):
    """Actuator switchings in run time: `t_ns` int64, `channel` uint8, `level` uint8 (1 = energised);
    `cycle` int64: the cycle of the channel's plan as the sampler counts it (protocol version 2), -1
    where the sampler did not say (None: nowhere)."""

    __slots__ = ("t_ns", "channel", "level", "cycle")
    t_ns: np.ndarray
    channel: np.ndarray
    level: np.ndarray
    cycle: np.ndarray | None

    def __init__(
        self, t_ns: np.ndarray, channel: np.ndarray, level: np.ndarray, cycle: np.ndarray | None = None
    ) -> None:
        _set = object.__setattr__
        _set(self, "t_ns", t_ns)
        _set(self, "channel", channel)
        _set(self, "level", level)
        _set(self, "cycle", cycle)

    def __len__(self) -> int:
        return len(self.t_ns)

    @classmethod
    def empty(cls) -> TimedDrives:
        return cls(np.zeros(0, np.int64), np.zeros(0, np.uint8), np.zeros(0, np.uint8))

    @classmethod
    def of(cls, rows: list[tuple[int, int, int]]) -> TimedDrives:
        """From (t_ns, channel, level) rows."""
        if not rows:
            return cls.empty()
        t, ch, lv = zip(*rows, strict=True)
        return cls(np.asarray(t, np.int64), np.asarray(ch, np.uint8), np.asarray(lv, np.uint8))


class Incident(Slotted, frozen=True):
    """Something that happened to the data rather than to the parts.

    `t_start_ns`/`t_end_ns` bound, in run time, the stretch whose data is missing or doubtful (equal
    when it is a point). `edges_lost` is how many edges are known lost (None when unknown). `channel` is
    None when the incident concerns the whole bench. `cycles_lost` (CYCLES_NOT_OBSERVED): how many cycles
    of the channel's unit the sampler did that the host has no measurement of.
    """

    __slots__ = (
        "kind",
        "t_start_ns",
        "t_end_ns",
        "host_start_ns",
        "host_end_ns",
        "edges_lost",
        "channel",
        "detail",
        "cycles_lost",
    )
    kind: str
    t_start_ns: int
    t_end_ns: int
    host_start_ns: int
    host_end_ns: int
    edges_lost: int | None
    channel: int | None
    detail: str
    cycles_lost: int | None

    def __init__(
        self,
        kind: str,
        t_start_ns: int,
        t_end_ns: int,
        host_start_ns: int,
        host_end_ns: int,
        edges_lost: int | None = None,
        channel: int | None = None,
        detail: str = "",
        cycles_lost: int | None = None,
    ) -> None:
        _set = object.__setattr__
        _set(self, "kind", kind)
        _set(self, "t_start_ns", t_start_ns)
        _set(self, "t_end_ns", t_end_ns)
        _set(self, "host_start_ns", host_start_ns)
        _set(self, "host_end_ns", host_end_ns)
        _set(self, "edges_lost", edges_lost)
        _set(self, "channel", channel)
        _set(self, "detail", detail)
        _set(self, "cycles_lost", cycles_lost)


__all__ = [
    "TimedEdges",
    "TimedDrives",
    "Incident",
    "INCIDENT_KINDS",
    "DISCONNECT",
    "RESET",
    "DECODE_FAULT",
    "SEQUENCE_GAP",
    "OVERFLOW",
    "LOST_EDGES",
    "CLOCK",
    "CYCLES_NOT_OBSERVED",
    "EVENT_COMMAND",
]
