"""Pure, vectorised measurement of one channel's edges. No state, no Python loop per edge or actuation.

How it works, in three steps, all over numpy arrays of one channel's edges (times in ns):

1. `dedupe`: a contact's levels must alternate; an edge repeating the current level (a lost edge
   upstream) carries no change and is dropped.
2. `filter_glitches`: consecutive intervals shorter than the glitch floor form a run. A run with an
   even number of edges is a pulse (or pulses) that came back: all its edges go, and each pair counts
   as one glitch. A run with an odd number of edges is a transition with glitches on it: its first edge
   stays (the moment the contact first changed), the rest go. Removing a run never creates a shorter
   interval, so one pass is exact.
3. `measure_windows`: each actuation owns a window [start, end) of the filtered edges (drive to next
   drive, or one free-running group plus the stable period after it) and an expected state. Inside it:
   the first edge toward the expected state is the first transition; the settle point is the first edge
   into the expected state that then stays there for the settle window (or until the window ends); edges
   between are bounce; excursions after the settle point are chatter when at least the chatter threshold
   long.
"""

from __future__ import annotations

import numpy as np

from benchlog.analysis._types import (
    BREAK,
    CHATTER,
    GLITCHY,
    MAKE,
    MISSED,
    NO_CHANGE,
    NO_VERDICT,
    STUCK,
    empty_actuations,
)

_NS_PER_US = 1000.0


def dedupe(t: np.ndarray, lv: np.ndarray, level_before: int) -> tuple[np.ndarray, np.ndarray]:
    """Drop edges that repeat the level before them (binary levels: a run-length compression)."""
    if len(t) == 0:
        return t, lv
    keep = np.empty(len(lv), bool)
    keep[0] = lv[0] != level_before
    np.not_equal(lv[1:], lv[:-1], out=keep[1:])
    if keep.all():
        return t, lv
    return t[keep], lv[keep]


def filter_glitches(t: np.ndarray, floor_ns: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Glitch runs of alternating edges `t` (see module doc).

    Returns (kept, group_start, glitch_t, glitch_n): indices of the edges kept, the first index of the
    run each edge belongs to, and for runs holding glitches their start time and glitch count.
    """
    n = len(t)
    if n == 0:
        z = np.zeros(0, np.int64)
        return z, z, z, z
    new_run = np.ones(n, bool)
    if n > 1:
        new_run[1:] = np.diff(t) >= floor_ns
    if new_run.all():
        idx = np.arange(n, dtype=np.int64)
        z = np.zeros(0, np.int64)
        return idx, idx, z, z
    starts = np.flatnonzero(new_run)
    sizes = np.diff(np.append(starts, n))
    kept = starts[(sizes & 1) == 1]
    group_start = starts[np.cumsum(new_run) - 1]
    glitchy = sizes >= 2
    return kept, group_start, t[starts[glitchy]], (sizes[glitchy] // 2).astype(np.int64)


def measure_windows(
    t: np.ndarray,
    lv: np.ndarray,
    level_before: int,
    w_start: np.ndarray,
    w_end: np.ndarray,
    expected: np.ndarray,
    settle_ns: int,
    chatter_ns: int,
    glitch_t: np.ndarray | None = None,
    glitch_n: np.ndarray | None = None,
) -> np.ndarray:
    """Measure actuations over sorted, non-overlapping windows of filtered, alternating edges.

    Fills channel-independent columns of ACTUATION_DTYPE: kind, t_start_ns (= window start), t_first_ns,
    t_settle_ns, t_end_ns, bounce_us, bounce_count, longest_gap_us, wrong_state_us, glitches, chatter
    and flags (MISSED, STUCK, NO_CHANGE, GLITCHY, CHATTER). transit_us is left NaN for the caller.
    """
    k = len(w_start)
    out = empty_actuations(k)
    if k == 0:
        return out
    w_start = np.asarray(w_start, np.int64)
    w_end = np.asarray(w_end, np.int64)
    expected = np.asarray(expected, np.uint8)
    n_edges = len(t)
    a = np.searchsorted(t, w_start, "left")
    if k > 1 and (w_end[:-1] == w_start[1:]).all():  # windows end where the next starts (drive to drive)
        b = np.empty(k, np.intp)
        b[:-1] = a[1:]
        b[-1] = np.searchsorted(t, w_end[-1], "left")
    else:
        b = np.searchsorted(t, w_end, "left")
    last = max(n_edges - 1, 0)  # reads below are masked where they would fall past the last edge
    if n_edges:
        level_at_start = np.where(a > 0, lv[np.maximum(a - 1, 0)], level_before)
    else:
        level_at_start = np.full(k, level_before)
    moved = level_at_start != expected
    count = b - a

    # Per-edge quantities. Edges outside every window get values too, but every query below stays
    # inside one window's index range [a, b), so they never count. The window of an edge: the last
    # window starting at or before it, counted from the windows' first edges `a` (t is sorted, so
    # w_start[i] <= t[e] exactly when a[i] <= e), one pass where a search per edge costs a log.
    starts_before = np.cumsum(np.bincount(a, minlength=n_edges + 1)[:n_edges])
    win = np.maximum(starts_before - 1, 0)
    e_edge = expected[win]
    we_edge = w_end[win]
    nxt = np.empty(n_edges, np.int64)
    if n_edges:
        nxt[:-1] = t[1:]
        nxt[-1] = np.iinfo(np.int64).max
    last_in_window = nxt >= we_edge
    dwell = np.minimum(nxt, we_edge, out=nxt)
    dwell -= t
    away = lv != e_edge
    cand = ~away & ((dwell >= settle_ns) | last_in_window)

    cand_idx = np.flatnonzero(cand)
    if len(cand_idx):
        pos = np.searchsorted(cand_idx, a, "left")
        j = np.where(pos < len(cand_idx), cand_idx[np.minimum(pos, len(cand_idx) - 1)], -1)
    else:
        j = np.full(k, -1, np.int64)
    has_edges = count > 0
    settled = moved & has_edges & (j >= 0) & (j < b)

    # time away from the expected state after each edge, with a 0 after the last (for reduceat)
    padded = np.zeros(n_edges + 1, np.int64)
    np.multiply(dwell, away, out=padded[:n_edges])
    away_cum = np.empty(n_edges + 1, np.int64)
    away_cum[0] = 0
    np.cumsum(padded[:n_edges], out=away_cum[1:])
    chat_cum = np.empty(n_edges + 1, np.int64)
    chat_cum[0] = 0
    np.cumsum(away & (dwell >= chatter_ns), dtype=np.int64, out=chat_cum[1:])

    # Bounce spans [a, end_b): to the settle point when settled, else to the window end.
    end_b = np.where(settled, j, b)
    end_b = np.where(moved, end_b, a)
    idx = np.empty(2 * k, np.int64)
    idx[0::2] = np.minimum(a, n_edges)
    idx[1::2] = np.minimum(end_b, n_edges)
    longest = np.maximum.reduceat(padded, idx)[0::2] if n_edges else np.zeros(k, np.int64)
    longest = np.where(end_b > a, longest, 0)
    t_first = np.where(moved & has_edges, t[np.minimum(a, last)], -1) if n_edges else np.full(k, -1)
    t_settle = np.where(settled, t[np.clip(j, 0, last)], -1) if n_edges else np.full(k, -1)

    out["kind"] = np.where(expected == 1, MAKE, BREAK)
    out["t_start_ns"] = w_start
    out["t_end_ns"] = w_end
    out["t_first_ns"] = t_first
    out["t_settle_ns"] = t_settle
    out["transit_us"] = np.nan
    out["bounce_us"] = np.where(settled, (out["t_settle_ns"] - out["t_first_ns"]) / _NS_PER_US, np.nan)
    # levels alternate and the first edge goes toward the expected state: every second one is away
    out["bounce_count"] = np.where(moved & has_edges, (end_b - a) // 2, 0)
    out["longest_gap_us"] = np.where(moved & has_edges, longest / _NS_PER_US, np.nan)
    # A stuck contact never left the old state: all of its window was spent there (docs/metrics.md).
    out["wrong_state_us"] = np.where(
        has_edges, (away_cum[end_b] - away_cum[a]) / _NS_PER_US, (w_end - w_start) / _NS_PER_US
    )
    out["wrong_state_us"] = np.where(moved, out["wrong_state_us"], np.nan)
    # Chatter: excursions in the stable period (after the settle point, or the whole window when the
    # contact was already in the expected state).
    c_from = np.where(settled, j, np.where(moved, b, a))
    out["chatter"] = chat_cum[b] - chat_cum[c_from]
    out["transfer_us"] = np.nan
    out["verdict"] = NO_VERDICT
    if glitch_t is not None and len(glitch_t):
        g_cum = np.concatenate(([0], np.cumsum(glitch_n)))
        out["glitches"] = (
            g_cum[np.searchsorted(glitch_t, w_end, "left")]
            - g_cum[np.searchsorted(glitch_t, w_start, "left")]
        )
    flags = np.zeros(k, np.uint16)
    flags |= np.where(~moved, NO_CHANGE, 0).astype(np.uint16)
    flags |= np.where(moved & ~has_edges, STUCK | MISSED, 0).astype(np.uint16)
    flags |= np.where(moved & has_edges & ~settled, MISSED, 0).astype(np.uint16)
    flags |= np.where(out["glitches"] > 0, GLITCHY, 0).astype(np.uint16)
    flags |= np.where(out["chatter"] > 0, CHATTER, 0).astype(np.uint16)
    out["flags"] = flags
    return out
