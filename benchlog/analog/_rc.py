"""The RC network replayed on a real waveform, and R and C chosen from it.

The filter: the contact node (the captured trace, scaled to the input's supply) drives a series R into
a capacitor C to ground; the Schmitt input reads the capacitor. This is the first-order low-pass
`tau dv/dt = u - v`, tau = R C. (The pull-up's own resistance adds to R while the contact is open;
with R well above the pull-up, as usual, it is left out.)

**Exact between samples.** A sampled trace is taken as linear between its samples (first-order hold).
Over one sample interval h, with a = exp(-h/tau), the exact solution of the equation for a linear input
from u_k to u_(k+1) is

    v_(k+1) = a v_k + (1 - a) u_k + (1 - tau (1 - a) / h) (u_(k+1) - u_k),

an affine map of v_k. With even samples the map is the same at every step: a first-order recursive
filter, run by `scipy.signal.lfilter`; with uneven samples the node at every sample comes from one
prefix scan of the affine maps (the design stage's `affine_scan`). No time step, no loop over samples.

Tolerance corners: R and C each at both ends of their tolerance (the two extreme tau), the supply at both
ends of its tolerance, VT+ and VT- at both ends of the input's range (VT- kept at least the guaranteed
hysteresis below VT+): 32 corners. Scores per actuation (as the designer's, docs/debounce.md): false
transitions (the input changed more than once), missed (it did not end in the new state), margin (after
switching, how far the node stayed from the other threshold), delay (input change minus the contact's
first transition by the voltage definitions).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from benchlog.analog._capture import Capture
from benchlog.analog._measure import Measured
from benchlog.analysis import INCOMPLETE, MAKE, MISSED
from benchlog.design import InputThresholds, affine_scan, preferred_values
from benchlog.errors import DataError


def foh_maps(h: np.ndarray, tau: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per step coefficients (a, p, q) of v_(k+1) = a v_k + p u_k + q u_(k+1); rows of tau x steps."""
    x = np.asarray(h, np.float64)[None, :] / np.asarray(tau, np.float64)[:, None]
    a = np.exp(-x)
    one_minus_a = -np.expm1(-x)
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = np.where(x > 0, (x + np.expm1(-x)) / x, 0.0)  # 1 - tau (1 - a) / h, accurate for small x
    return a, one_minus_a - slope, slope


def rc_node(u: np.ndarray, h: np.ndarray | float, tau: np.ndarray, v0: np.ndarray | float | None = None,
            reset: np.ndarray | None = None) -> np.ndarray:  # fmt: skip
    """Exact node voltage at every sample of input `u` (linear between samples), for each tau (rows).

    `h`: the sample interval (scalar or per step, len(u) - 1). `v0`: the node at sample 0 (default u[0],
    settled). `reset`: sample indices where the node starts settled at u again (independent windows
    concatenated into one array).
    """
    u = np.asarray(u, np.float64)
    tau = np.atleast_1d(np.asarray(tau, np.float64))
    n = len(u)
    out = np.empty((len(tau), n))
    if n == 0:
        return out
    start = (
        np.full(len(tau), u[0]) if v0 is None else np.broadcast_to(np.asarray(v0, np.float64), (len(tau),))
    )
    cuts = np.zeros(0, np.int64) if reset is None else np.asarray(reset, np.int64)
    cuts = np.unique(cuts[(cuts > 0) & (cuts < n)])
    if np.ndim(h) == 0:
        return _uniform(u, float(h), tau, start, cuts, out)
    steps = np.broadcast_to(np.asarray(h, np.float64), (n - 1,))
    a, p, q = foh_maps(steps, tau)
    b = p * u[None, :-1] + q * u[None, 1:]
    a[:, cuts - 1] = 0.0
    b[:, cuts - 1] = u[cuts]
    big_a, big_b = affine_scan(a, b)
    out[:, 0] = start
    out[:, 1:] = big_a * start[:, None] + big_b
    return out


def _uniform(u: np.ndarray, h: float, tau: np.ndarray, start: np.ndarray, cuts: np.ndarray, out: np.ndarray):
    """Even samples: the same affine map every step, so the recursion is a first-order IIR filter (run
    by scipy.signal.lfilter, window by window)."""
    from scipy.signal import lfilter

    a, p, q = (x[:, 0] for x in foh_maps(np.array([h]), tau))
    bounds = np.concatenate(([0], cuts, [len(u)]))
    for r in range(len(tau)):
        for w0, w1 in zip(bounds[:-1], bounds[1:], strict=True):
            seg = u[w0:w1]
            v0 = start[r] if w0 == 0 else seg[0]
            out[r, w0] = v0
            if len(seg) > 1:
                drive = p[r] * seg[:-1] + q[r] * seg[1:]
                out[r, w0 + 1 : w1] = lfilter([1.0], [1.0, -a[r]], drive, zi=[a[r] * v0])[0]
    return out


@dataclass(frozen=True, slots=True)
class Corner:
    tau_s: float
    supply: float
    vt_plus: float
    vt_minus: float


def corners(
    r: float, c: float, r_tol: float, c_tol: float, row: InputThresholds, supply: float, supply_tol: float
) -> list[Corner]:
    out = []
    for tau in (r * (1 - r_tol) * c * (1 - c_tol), r * (1 + r_tol) * c * (1 + c_tol)):
        for vdd in (supply * (1 - supply_tol), supply * (1 + supply_tol)):
            (p_lo, p_hi), (m_lo, m_hi) = row.at_supply(vdd)
            for vtp in (p_lo, p_hi):
                for vtm in (m_lo, m_hi):
                    vtm = min(vtm, vtp - row.hysteresis_min)
                    out.append(Corner(tau, vdd, vtp, max(vtm, 0.0)))
    return out


@dataclass(frozen=True, slots=True)
class Score:
    """One candidate over every corner and every judged actuation."""

    r: float
    c: float
    false_transitions: int
    missed: int
    margin_v: float  # the smallest over corners and actuations (negative: crossed back)
    delay_make_us: float  # the largest
    delay_break_us: float
    passes: bool


@dataclass(frozen=True, slots=True, eq=False)
class Windows:
    """The judged actuations' stretches of the trace, concatenated, each starting settled."""

    u: np.ndarray  # the trace divided by the open-circuit voltage (1 = open)
    h: np.ndarray | float
    starts: np.ndarray  # sample index in `u` where each window starts
    t_first_s: np.ndarray  # per window: the contact's first transition, seconds from the window start
    expected: np.ndarray  # per window: 1 = ends closed (make), 0 = ends open (break)
    rows: np.ndarray  # the actuation rows judged
    sample_start: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))  # in the capture


def windows(cap: Capture, v: np.ndarray, measured: Measured, v_open: float, pre_ns: int = 100_000,
            max_after_ns: int = 50_000_000) -> Windows:  # fmt: skip
    rows = measured.actuations
    rows = rows[((rows["flags"] & (INCOMPLETE | MISSED)) == 0) & (rows["t_first_ns"] >= 0)]
    if not len(rows):
        raise DataError(f"{cap.source}: no complete make or break to design from")
    dt_ns = cap.dt_s * 1e9
    first = rows["t_first_ns"]
    lo = np.maximum(first - pre_ns, 0)
    # start settled: after the previous actuation's settle point (or its first transition)
    prev = np.concatenate(([0], np.maximum(rows["t_settle_ns"][:-1], rows["t_first_ns"][:-1]) + 1))
    lo = np.maximum(lo, prev)
    hi = np.minimum(rows["t_end_ns"], np.maximum(rows["t_settle_ns"], first) + max_after_ns)
    if cap.t_s is not None:
        base = cap.t_s - cap.t0_s
        k0 = np.searchsorted(base * 1e9, lo)
        k1 = np.searchsorted(base * 1e9, hi)
    else:
        k0 = np.ceil(lo / dt_ns).astype(np.int64)
        k1 = np.minimum(np.floor(hi / dt_ns).astype(np.int64) + 1, len(v))
    k1 = np.maximum(k1, k0 + 2)
    parts = [v[a:b] for a, b in zip(k0, k1, strict=True)]
    lengths = np.array([len(p) for p in parts])
    starts = np.concatenate(([0], np.cumsum(lengths)[:-1]))
    u = np.concatenate(parts) / v_open
    if cap.t_s is None:
        h: np.ndarray | float = cap.dt_s
        t_window0 = k0 * cap.dt_s
    else:
        t_parts = np.concatenate([cap.t_s[a:b] for a, b in zip(k0, k1, strict=True)])
        h = np.diff(t_parts)
        t_window0 = cap.t_s[k0] - cap.t0_s
    t_first = first / 1e9 - t_window0
    expected = (rows["kind"] == MAKE).astype(np.int8)
    return Windows(u, h, starts, t_first, expected, rows, k0)


def score(win: Windows, r: float, c: float, cs: list[Corner], margin_v: float) -> Score:
    """Replay one R, C over every corner; pass = no false or missed transition and the margin kept."""
    taus = np.array(sorted({k.tau_s for k in cs}))
    node = rc_node(win.u, win.h, taus, reset=win.starts)
    n_win = len(win.starts)
    ends = np.append(win.starts[1:], len(win.u))
    false_total = missed_total = 0
    worst_margin = np.inf
    delay = {0: np.nan, 1: np.nan}
    times = _sample_times(win)
    crossings: dict[tuple[int, float, bool], np.ndarray] = {}
    for k in cs:
        ti = int(np.searchsorted(taus, k.tau_s))
        row = node[ti] * k.supply
        idx, lvl = _schmitt(node[ti], k.vt_plus / k.supply, k.vt_minus / k.supply, ti, crossings)
        w = np.searchsorted(win.starts, idx, side="right") - 1
        real = idx > win.starts[w]  # a change at a window's first sample is the reset, not the input
        idx, lvl, w = idx[real], lvl[real], w[real]
        changes = np.bincount(w, minlength=n_win)
        into = lvl == win.expected[w]
        first_into = np.full(n_win, -1, np.int64)
        sel = np.flatnonzero(into)
        _, pos = np.unique(w[sel], return_index=True)
        first_into[w[sel[pos]]] = idx[sel[pos]]
        # final state per window: the last change's level, else the window's starting state
        last = np.full(n_win, -1, np.int64)
        last[w] = lvl  # later changes overwrite earlier ones
        ended_right = last == win.expected
        missed = ~ended_right
        false = np.maximum(changes - 1, 0) + np.where(ended_right, 0, changes > 0)
        false_total += int(false.sum())
        missed_total += int(missed.sum())
        ok = first_into >= 0
        if ok.any():
            # margin after switching: make -> VT+ minus the highest the node rose again; break the other way
            d = times[first_into[ok]] - win.t_first_s[ok]
            for kind in (0, 1):
                m = win.expected[ok] == kind
                if m.any():
                    delay[kind] = float(np.fmax(delay[kind], d[m].max()))
            bounds = np.ravel(np.column_stack((first_into[ok], ends[ok])))
            if bounds[-1] >= len(row):
                bounds = bounds[:-1]  # the last segment runs to the end of the array
            hi_after = np.maximum.reduceat(row, bounds)[::2]
            lo_after = np.minimum.reduceat(row, bounds)[::2]
            marg = np.where(win.expected[ok] == 1, k.vt_plus - hi_after, lo_after - k.vt_minus)
            worst_margin = min(worst_margin, float(marg.min()))
    passes = false_total == 0 and missed_total == 0 and worst_margin >= margin_v
    return Score(r, c, false_total, missed_total, worst_margin, delay[1] * 1e6, delay[0] * 1e6, passes)


def _schmitt(
    node: np.ndarray, hi: float, lo: float, key: int, cache: dict[tuple[int, float, bool], np.ndarray]
) -> tuple[np.ndarray, np.ndarray]:
    """Changes of a Schmitt input on `node` (sample index, new state, 1 = low), from the crossings of each
    threshold: after a fall through `lo` the next rise through `hi` is the next change, and the other way
    round. Crossings of one level are found once and shared by every corner that uses it."""
    for level, rising in ((hi, True), (lo, False)):
        if (key, level, rising) not in cache:
            beyond = node >= level if rising else node <= level
            cache[(key, level, rising)] = np.flatnonzero(beyond[1:] & ~beyond[:-1]) + 1
    up, down = cache[(key, hi, True)], cache[(key, lo, False)]
    idx = np.concatenate((up, down))
    new = np.concatenate((np.zeros(len(up), np.int8), np.ones(len(down), np.int8)))
    order = np.argsort(idx, kind="stable")
    idx, new = idx[order], new[order]
    first = 0 if node[0] >= hi else 1 if node[0] <= lo else -1
    prev = np.empty_like(new)
    if len(new):
        prev[0] = first
        prev[1:] = new[:-1]
    change = new != prev
    return idx[change], new[change]


def _sample_times(win: Windows) -> np.ndarray:
    """Seconds of every concatenated sample from the start of its own window."""
    n = len(win.u)
    if np.ndim(win.h) == 0:
        local = np.arange(n) - np.repeat(win.starts, np.diff(np.append(win.starts, n)))
        return local * float(win.h)
    steps = np.concatenate(([0.0], np.asarray(win.h)))
    steps[win.starts] = 0.0
    total = np.cumsum(steps)
    return total - np.repeat(total[win.starts], np.diff(np.append(win.starts, n)))


@dataclass(frozen=True, slots=True, eq=False)
class WaveformDesign:
    chosen: Score | None
    table: list[Score]
    windows: Windows
    corners_per_candidate: int


def design_from_waveform(
    cap: Capture,
    v: np.ndarray,
    measured: Measured,
    v_open: float,
    row: InputThresholds,
    supply: float,
    *,
    r_series: float = 10_000.0,
    r_tol: float = 0.05,
    c_tol: float = 0.10,
    supply_tol: float = 0.05,
    margin_v: float = 0.2,
    series: str = "E12",
    c_range: tuple[float, float] = (100e-12, 100e-6),
    extra: int = 3,
) -> WaveformDesign:
    """The smallest preferred C (with series R `r_series`) that passes at every corner, and a few above.

    Small C lets bounce through; large C makes the input too slow to follow the contact within its stable
    period (missed). Whether bounce gets through falls with C (nearly monotone: the search bisects on it,
    then steps down while the next smaller value is clean too); the chosen value must then also switch
    in time at every corner.
    """
    values = preferred_values(series, *c_range)
    cache: dict[int, Score] = {}
    wins: dict[int, Windows] = {}
    settle_ns = int(measured.actuations["t_end_ns"].max()) if len(measured.actuations) else 0

    def window_for(c: float) -> Windows:
        # long enough for the slowest corner to settle (10 tau: within 5e-5), short enough to stay cheap
        after = int(np.clip(10 * r_series * (1 + r_tol) * c * (1 + c_tol) * 1e9, 1_000_000, 50_000_000))
        after = min(after, max(settle_ns, 1_000_000))
        if after not in wins:
            wins[after] = windows(cap, v, measured, v_open, max_after_ns=after)
        return wins[after]

    def at(i: int) -> Score:
        if i not in cache:
            c = float(values[i])
            cs = corners(r_series, c, r_tol, c_tol, row, supply, supply_tol)
            cache[i] = score(window_for(c), r_series, c, cs, margin_v)
        return cache[i]

    def clean(i: int) -> bool:
        s = at(i)
        return s.false_transitions == 0 and s.margin_v >= margin_v

    lo, hi = 0, len(values) - 1
    if not clean(hi):
        return WaveformDesign(None, [at(hi)], window_for(float(values[hi])), 32)
    while lo < hi:
        mid = (lo + hi) // 2
        if clean(mid):
            hi = mid
        else:
            lo = mid + 1
    i = lo
    while i > 0 and clean(i - 1):  # not strictly monotone: step down while the smaller one is clean too
        i -= 1
    chosen = at(i) if at(i).passes else None
    table = [at(j) for j in range(max(0, i - 2), min(len(values), i + 1 + extra))]
    return WaveformDesign(chosen, table, window_for(float(values[i])), 32)
