"""Scoring a debounced output against the recorded actuations.

Each judged actuation owns a window `[start, end)`: from its first transition (`t_first_ns`) to the next
actuation's first transition. A good debouncer makes exactly one accepted change in the window, into the
actuation's new state. Any other change in the window is a false transition; a window that ends in the
wrong state is a missed actuation; the delay is the first change into the new state minus `t_first_ns`.

Several outputs (rows: parameter values, or tolerance corners) are scored in one call.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, slots=True, eq=False)
class Windows:
    start: np.ndarray  # int64 ns, sorted, non-overlapping
    end: np.ndarray  # int64 ns
    target: np.ndarray  # int8: 1 = make (closed), 0 = break
    judged: np.ndarray  # bool

    def __len__(self) -> int:
        return len(self.start)


@dataclass(frozen=True, slots=True, eq=False)
class Score:
    """Per row and window (shape rows x windows)."""

    changes: np.ndarray  # accepted changes in the window
    false: np.ndarray  # false transitions
    missed: np.ndarray  # bool: window ended in the wrong state
    delay_ns: np.ndarray  # float: first change into the new state minus start (NaN when missed)
    good_at_ns: np.ndarray  # float: time of that change (NaN when none)

    @property
    def clean(self) -> np.ndarray:
        return (self.false == 0) & ~self.missed


def score(windows: Windows, row: np.ndarray, t_ns: np.ndarray, new: np.ndarray, initial: np.ndarray) -> Score:
    """`row`, `t_ns`, `new`: accepted changes of every row; `initial[row]`: each output's first level.

    Linear in rows x windows plus changes: every change is given its window once (`w`), and the level
    of a row just before a window's start or end is the value of its last change before it, found by a
    running maximum of change indices over the row's windows (the changes are sorted by row, then time).
    """
    nrow, nwin = len(initial), len(windows)
    row = np.asarray(row, np.int64)
    t = np.asarray(t_ns, np.int64)
    new = np.asarray(new, np.int8)
    initial = np.asarray(initial, np.int8)
    if len(row) > 1:
        d_row = np.diff(row)
        if not ((d_row > 0) | ((d_row == 0) & (np.diff(t) >= 0))).all():  # replays come sorted
            order = np.lexsort((t, row))
            row, t, new = row[order], t[order], new[order]
    # window of each change: t in [start[w], start[w + 1]); inside: also before end[w]
    w = np.searchsorted(windows.start, t, side="right") - 1
    inside = (w >= 0) & (t < windows.end[np.maximum(w, 0)])
    # index of the last change of each row before each window's start (a change of window w < j is
    # before start j), and before its end (those, or a change inside window j)
    before = _last_per_cell(row * (nwin + 1) + (w + 1), nrow * (nwin + 1)).reshape(nrow, nwin + 1)
    np.maximum.accumulate(before, axis=1, out=before)
    before = before[:, :nwin]
    flat = row[inside] * nwin + w[inside]
    last_in = _last_per_cell(flat, nrow * nwin, np.flatnonzero(inside)).reshape(nrow, nwin)
    until_end = np.maximum(before, last_in)

    def level(idx: np.ndarray) -> np.ndarray:
        if len(new) == 0:  # no output changed at all (a window longer than every recorded run)
            return np.repeat(initial[:, None], nwin, axis=1)
        return np.where(idx >= 0, new[np.maximum(idx, 0)], initial[:, None]).astype(np.int8)

    entering = level(before)
    leaving = level(until_end)
    changes = np.bincount(flat, minlength=nrow * nwin).reshape(nrow, nwin)
    target = windows.target[None, :]
    reached = leaving == target
    needed = entering != target
    good = reached & needed
    false = changes - good.astype(np.int64)
    into = inside.copy()
    into[inside] = new[inside] == windows.target[w[inside]]
    flat_into = row[into] * nwin + w[into]
    first_at = np.full(nrow * nwin, np.nan)
    # sorted by (row, t), so (row, window) never decreases: the first of each run is the earliest
    first = np.flatnonzero(np.diff(flat_into, prepend=-1))
    first_at[flat_into[first]] = t[into][first]
    first_at = first_at.reshape(nrow, nwin)
    good_at = np.where(good, first_at, np.nan)
    delay = good_at - windows.start[None, :]
    return Score(changes, false, ~reached, delay, good_at)


def _last_per_cell(flat: np.ndarray, cells: int, pos: np.ndarray | None = None) -> np.ndarray:
    """For sorted cell numbers `flat`, the position of the last entry of each cell (-1: none), or
    `pos` at that position."""
    out = np.full(cells, -1, np.int64)
    if len(flat):
        last = np.flatnonzero(np.diff(flat, append=cells))
        out[flat[last]] = last if pos is None else pos[last]
    return out
