"""Edges by the voltage definitions: two thresholds with hysteresis, minimum durations, interpolated times.

The contact is read from the voltage across it: near the open-circuit voltage when open, near zero when
closed. A trace is *closed* from the moment it falls through the lower threshold until it rises through
the upper one, and *open* from then until it falls through the lower one again; between the thresholds
it keeps its state (hysteresis). Each crossing time is interpolated linearly between the two samples
around it. A state counts only when the trace stays beyond its threshold (above the upper one for open,
below the lower one for closed) for at least the minimum duration; shorter excursions are dropped, and
the states they split join again.

The default rule is the one several military relay specifications write: a contact is open (a bounce,
or chatter) when the voltage across it reaches at least 90 % of the open-circuit voltage for at least
10 us (MIL-PRF-39016 and the contact-chatter monitoring of MIL-STD-202 method 310; both from memory).
The closed threshold of 10 % of the open-circuit voltage, and applying the same minimum duration to
closures, are ours. Any other pair of thresholds (a logic family's VIH/VIL, a Schmitt input's VT+/VT-)
works the same way.

Everything runs in blocks of samples with the state carried across, so memory stays a few blocks.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from benchlog.analog._capture import Capture
from benchlog.errors import DataError

BLOCK = 1 << 20
MIL_OPEN_FRACTION = 0.9  # MIL-PRF-39016 / MIL-STD-202 method 310 bounce and chatter level (from memory)
MIL_MIN_NS = 10_000  # ... held for at least 10 us (from memory)
CLOSED_FRACTION = 0.1  # ours


@dataclass(frozen=True, slots=True)
class Levels:
    """Thresholds in volts and minimum durations in ns; `label` says where they come from."""

    open_above: float
    closed_below: float
    min_open_ns: float = 0.0
    min_closed_ns: float = 0.0
    label: str = ""
    v_open: float | None = None

    def __post_init__(self) -> None:
        if not self.open_above > self.closed_below:
            raise DataError(
                f"the open threshold ({self.open_above:g} V) must lie above the closed threshold "
                f"({self.closed_below:g} V)"
            )


def fraction_levels(
    v_open: float,
    open_fraction: float = MIL_OPEN_FRACTION,
    closed_fraction: float = CLOSED_FRACTION,
    min_ns: float = MIL_MIN_NS,
) -> Levels:
    """Thresholds as fractions of the open-circuit voltage (default: the 90 % / 10 us rule)."""
    return Levels(
        open_fraction * v_open,
        closed_fraction * v_open,
        float(min_ns),
        float(min_ns),
        f"{open_fraction:.0%} / {closed_fraction:.0%} of {v_open:.4g} V, held >= {min_ns / 1e3:g} us",
        v_open,
    )


def open_circuit_level(v: np.ndarray, source: str = "capture") -> float:
    """The open-circuit voltage: where the trace sits when the contact is open.

    The upper cluster of samples (above the middle of the 0.1 % and 99.9 % percentiles) must hold at
    least 2 % of the samples with a spread under 10 % of its level, and its level must be clearly away
    from zero; else there is no clear open-circuit level and a DataError says so.
    """
    step = max(1, len(v) // 250_000)  # a level, not a distribution: a quarter million samples do
    s = np.asarray(v[::step], np.float64)
    s = s[np.isfinite(s)]
    if len(s) < 16:
        raise DataError(f"{source}: too few samples to find the open-circuit level")
    lo, hi = np.percentile(s, [0.1, 99.9])
    upper = s[s > 0.5 * (lo + hi)]
    if hi <= 0 or len(upper) < 0.02 * len(s):
        raise DataError(f"{source}: no clear open-circuit level (the trace never rests high); give --open-v")
    level = float(np.median(upper))
    p10, p90 = np.percentile(upper, [10, 90])
    if level <= 0 or p90 - p10 > 0.1 * level or (hi - lo) < 0.3 * level:
        raise DataError(
            f"{source}: no clear open-circuit level (upper samples spread {p10:.3g}..{p90:.3g} V, "
            f"range {lo:.3g}..{hi:.3g} V); give --open-v"
        )
    return level


@dataclass(frozen=True, slots=True, eq=False)
class Edges:
    """Contact edges of one channel: `t_s` float seconds, `level` uint8 (1 = closed), `initial` state."""

    t_s: np.ndarray
    level: np.ndarray
    initial: int  # -1: the trace never left the band between the thresholds

    def __len__(self) -> int:
        return len(self.t_s)


def _cross_time(cap: Capture, v: np.ndarray, k: np.ndarray, level: float) -> np.ndarray:
    """Interpolated time at which the trace crosses `level` between samples k-1 and k."""
    a, b = v[k - 1], v[k]
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(b != a, (level - a) / (b - a), 1.0)
    frac = np.clip(np.nan_to_num(frac, nan=1.0), 0.0, 1.0)
    return cap.times_s((k - 1) + frac)


def _states(v: np.ndarray, hi: float, lo: float) -> tuple[np.ndarray, np.ndarray, int]:
    """Sample indices where the hysteresis state changes, the new states (1 = below lo), the initial."""
    idx, lvl = [], []
    state = -1
    initial = -1
    for a in range(0, len(v), BLOCK):
        seg = v[a : a + BLOCK]
        d = np.full(len(seg), -1, np.int8)
        d[seg >= hi] = 0
        d[seg <= lo] = 1
        pos = np.flatnonzero(d >= 0)
        if not len(pos):
            continue
        vals = d[pos]
        if state == -1:
            initial = state = int(vals[0])
        prev = np.empty_like(vals)
        prev[0] = state
        prev[1:] = vals[:-1]
        change = vals != prev
        idx.append(pos[change] + a)
        lvl.append(vals[change])
        state = int(vals[-1])
    if not idx:
        return np.zeros(0, np.int64), np.zeros(0, np.uint8), -1
    return np.concatenate(idx), np.concatenate(lvl).astype(np.uint8), initial


def _exits(v: np.ndarray, level: float, upward: bool) -> np.ndarray:
    """Sample indices k where the trace leaves the region beyond `level` (above it if not upward ...)."""
    out = []
    for a in range(max(1, 0), len(v), BLOCK):
        seg = v[a - 1 : a + BLOCK]
        inside = seg <= level if upward else seg >= level
        k = np.flatnonzero(inside[:-1] & ~inside[1:])
        out.append(k + a)
    return np.concatenate(out) if out else np.zeros(0, np.int64)


def derive_edges(cap: Capture, v: np.ndarray, levels: Levels) -> Edges:
    """Contact edges of trace `v` (a channel of `cap`) by `levels`."""
    hi, lo = levels.open_above, levels.closed_below
    k, lvl, initial = _states(v, hi, lo)
    if not len(k):
        return Edges(np.zeros(0), np.zeros(0, np.uint8), initial)
    t = np.where(lvl == 0, _cross_time(cap, v, k, hi), _cross_time(cap, v, k, lo))
    if levels.min_open_ns <= 0 and levels.min_closed_ns <= 0:
        return Edges(t, lvl, initial)
    # how long each state stays beyond its threshold: to the last exit before the next edge
    nxt = np.append(k[1:], len(v))
    held_end = np.empty(len(k))
    end_s = float(cap.times_s(np.array([len(v) - 1]))[0])
    for state, level, upward in ((0, hi, False), (1, lo, True)):
        sel = lvl == state
        if not sel.any():
            continue
        ex = _exits(v, level, upward)
        j = np.searchsorted(ex, nxt[sel], side="right") - 1
        ok = (j >= 0) & (ex[np.maximum(j, 0)] > k[sel])
        ex_t = _cross_time(cap, v, ex[np.maximum(j, 0)], level) if len(ex) else np.zeros(sel.sum())
        last = nxt[sel] == len(v)
        held_end[sel] = np.where(last & ~ok, end_s, np.where(ok, ex_t, t[sel]))
    held = (held_end - t) * 1e9
    need = np.where(lvl == 0, levels.min_open_ns, levels.min_closed_ns)
    at_end = nxt == len(v)
    # a state still held at the end of the capture is kept: it may have lasted
    keep = (held >= need - 1e-6) | (at_end & (held_end >= end_s))
    t, lvl = t[keep], lvl[keep]
    prev = np.empty_like(lvl)
    if len(lvl):
        prev[0] = initial
        prev[1:] = lvl[:-1]
    alternate = lvl != prev
    return Edges(t[alternate], lvl[alternate], initial)


def drive_edges(cap: Capture, v: np.ndarray) -> Edges:
    """Drive records from a coil or control channel: energised (1) above 70 % of its range, off below 30 %."""
    lo, hi = np.percentile(v[:: max(1, len(v) // 250_000)], [1, 99])
    if hi - lo <= 0:
        return Edges(np.zeros(0), np.zeros(0, np.uint8), -1)
    up, down = lo + 0.7 * (hi - lo), lo + 0.3 * (hi - lo)
    k, lvl, initial = _states(v, up, down)
    t = np.where(lvl == 0, _cross_time(cap, v, k, up), _cross_time(cap, v, k, down))
    return Edges(t, (1 - lvl).astype(np.uint8), -1 if initial < 0 else 1 - initial)


def check_rate(cap: Capture, levels: Levels) -> None:
    """A minimum duration needs samples well inside it: at most a tenth of it per sample."""
    need = min(x for x in (levels.min_open_ns, levels.min_closed_ns, np.inf) if x > 0)
    if np.isfinite(need) and cap.dt_s * 1e9 > need / 10 * (1 + 1e-9):
        raise DataError(
            f"{cap.source}: sample interval {cap.dt_s * 1e6:.3g} us is too slow for the "
            f"{need / 1e3:g} us minimum duration (needs <= {need / 1e4:g} us, i.e. >= "
            f"{1e4 / need:g} MS/s); capture faster or lower --min-us"
        )
