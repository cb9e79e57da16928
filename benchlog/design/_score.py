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
    """`row`, `t_ns`, `new`: accepted changes of every row; `initial[row]`: each output's first level."""
    nrow, nwin = len(initial), len(windows)
    row = np.asarray(row, np.int64)
    t = np.asarray(t_ns, np.int64)
    new = np.asarray(new, np.int8)
    order = np.lexsort((t, row))
    row, t, new = row[order], t[order], new[order]
    base = int(min(windows.start.min(initial=0), t.min(initial=0)))
    span = int(max(windows.end.max(initial=0), t.max(initial=0))) - base + 1
    key = row * span + (t - base)

    def level_before(times: np.ndarray) -> np.ndarray:
        """Output level of each row just before each time: shape rows x len(times)."""
        if len(key) == 0:  # no output changed at all (a window longer than every recorded run)
            return np.repeat(initial[:, None], len(times), axis=1).astype(np.int8)
        q = np.arange(nrow)[:, None] * span + (times[None, :] - base)
        pos = np.searchsorted(key, q, side="left") - 1
        valid = pos >= 0
        same = valid & (row[np.maximum(pos, 0)] == np.arange(nrow)[:, None])
        return np.where(same, new[np.maximum(pos, 0)], initial[:, None]).astype(np.int8)

    entering = level_before(windows.start)
    leaving = level_before(windows.end)
    w = np.searchsorted(windows.start, t, side="right") - 1
    inside = (w >= 0) & (t < windows.end[np.maximum(w, 0)])
    flat = row[inside] * nwin + w[inside]
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
    uniq, first = np.unique(flat_into, return_index=True)  # sorted by (row, t): first is earliest
    first_at[uniq] = t[into][first]
    first_at = first_at.reshape(nrow, nwin)
    good_at = np.where(good, first_at, np.nan)
    delay = good_at - windows.start[None, :]
    return Score(changes, false, ~reached, delay, good_at)
