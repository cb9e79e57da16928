"""The recorded actuations of one channel, as the designer needs them.

The designer takes actuation rows (ACTUATION_DTYPE) from the analysis stage when it has them. When it
has only edges (a capture file, an edge file), `group_edges` finds the actuations itself with the plain
rule a bench engineer uses by eye: edges closer together than a quiet gap belong to one burst; a burst
that leaves the contact in the other state than before it is a make or a break (first edge = first
transition, last edge = start of the final stable state); a burst that returns to the old state is a
disturbance, not an actuation (any change it causes in a debouncer output counts as false).

`bounce_figures` measures, from the edges, the three figures the false-transition tail is fitted to:
bounce time (first transition to settling), longest single excursion back to the old state, and total
time in the old state during the bounce.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from benchlog.analysis._types import BREAK, FREE_RUNNING, INCOMPLETE, MAKE, MISSED, STUCK, empty_actuations
from benchlog.design._score import Windows
from benchlog.errors import DataError

_UNJUDGED = INCOMPLETE | MISSED | STUCK


def group_edges(
    t_ns: np.ndarray, level: np.ndarray, quiet_ns: int, channel: int = 0, initial: int | None = None
) -> np.ndarray:
    """Actuation rows found from one channel's edges alone (see module doc). Cycle = make count."""
    t = np.asarray(t_ns, np.int64)
    lv = np.asarray(level, np.int8)
    if len(t) == 0:
        return empty_actuations(0)
    init = int(1 - lv[0]) if initial is None else int(initial)
    burst_start = np.concatenate(([True], np.diff(t) > quiet_ns))
    first = np.flatnonzero(burst_start)
    last = np.concatenate((first[1:] - 1, [len(t) - 1]))
    final = lv[last]
    before = np.concatenate(([init], final[:-1]))
    real = final != before
    first, last, final = first[real], last[real], final[real]
    rows = empty_actuations(len(first))
    rows["channel"] = channel
    rows["kind"] = np.where(final == 1, MAKE, BREAK)
    rows["cycle"] = np.cumsum(final == 1)
    rows["t_start_ns"] = t[first]
    rows["t_first_ns"] = t[first]
    rows["t_settle_ns"] = t[last]
    rows["bounce_us"] = (t[last] - t[first]) / 1000.0
    rows["bounce_count"] = (last - first) // 2
    rows["flags"] = FREE_RUNNING
    rows["transit_us"] = np.nan
    rows["transfer_us"] = np.nan
    return rows


@dataclass(frozen=True, slots=True, eq=False)
class ChannelRecord:
    """One channel's edges and actuations, sorted, ready for replay."""

    channel: int
    t_ns: np.ndarray
    level: np.ndarray
    actuations: np.ndarray  # ACTUATION_DTYPE rows of this channel, sorted by t_first_ns
    initial: int
    t_end_ns: int | None = None  # end of the recording; unknown: the last actuation is not judged

    @property
    def windows(self) -> Windows:
        a = self.actuations
        start = a["t_first_ns"].astype(np.int64)
        last_end = (
            int(self.t_ns[-1]) + 1 if self.t_end_ns is None else max(self.t_end_ns, int(self.t_ns[-1]) + 1)
        )
        end = np.concatenate((start[1:], [last_end]))
        judged = ((a["flags"] & _UNJUDGED) == 0) & (a["t_first_ns"] >= 0) & (a["t_settle_ns"] >= 0)
        judged &= end > start
        if self.t_end_ns is None:
            judged[-1] = False
        return Windows(start, end, np.where(a["kind"] == MAKE, 1, 0).astype(np.int8), judged)


def channel_record(
    t_ns: np.ndarray,
    level: np.ndarray,
    actuations: np.ndarray | None,
    channel: int,
    quiet_ns: int,
    t_end_ns: int | None = None,
) -> ChannelRecord:
    """One channel's record; actuations from the analysis stage, or found by `group_edges`."""
    t = np.asarray(t_ns, np.int64)
    lv = np.asarray(level, np.int8)
    if len(t) == 0:
        raise DataError(f"channel {channel}: no edges")
    if (np.diff(t) < 0).any():  # recorded edges come sorted; a file may not
        order = np.argsort(t, kind="stable")
        t, lv = t[order], lv[order]
    if actuations is None or len(actuations) == 0:
        acts = group_edges(t, lv, quiet_ns, channel)
    else:
        acts = actuations[(actuations["channel"] == channel) & (actuations["t_first_ns"] >= 0)]
        if (np.diff(acts["t_first_ns"]) < 0).any():
            acts = acts[np.argsort(acts["t_first_ns"], kind="stable")]
    if len(acts) == 0:
        raise DataError(f"channel {channel}: no make or break found in {len(t)} edges")
    return ChannelRecord(channel, t, lv, acts, int(1 - lv[0]), t_end_ns)


@dataclass(frozen=True, slots=True, eq=False)
class BounceFigures:
    """Per actuation, in ns: bounce time, longest excursion to the old state, total time there."""

    bounce_ns: np.ndarray
    longest_ns: np.ndarray
    wrong_ns: np.ndarray


def bounce_figures(rec: ChannelRecord) -> BounceFigures:
    a = rec.actuations
    first = a["t_first_ns"].astype(np.int64)
    settle = np.maximum(a["t_settle_ns"].astype(np.int64), first)
    target = np.where(a["kind"] == MAKE, 1, 0)
    t, lv = rec.t_ns, rec.level
    t0 = t[:-1]
    w = np.searchsorted(first, t0, side="right") - 1
    ok = w >= 0
    wi = np.maximum(w, 0)
    inside = ok & (t0 >= first[wi]) & (t0 < settle[wi]) & (lv[:-1] != target[wi])
    end = np.minimum(t[1:], settle[wi])
    length = np.where(inside, end - t0, 0)
    n = len(a)
    wrong = np.bincount(wi[inside], weights=length[inside], minlength=n)
    longest = np.zeros(n)
    np.maximum.at(longest, wi[inside], length[inside].astype(np.float64))
    return BounceFigures((settle - first).astype(np.float64), longest, wrong)
