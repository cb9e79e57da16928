"""Choosing a firmware debounce from recorded actuations: sweep, recommend, and watch it over life.

For each debouncer (see `_debouncers.py`) and each parameter value on a grid, every channel's recording
is replayed at the sampling period and scored (`_score.py`): false transitions, missed actuations and the
delay distribution. The recommendation for a debouncer is the smallest parameter that

1. gives no false transition and no missed actuation in the recorded data, and
2. covers the bounce figure it is sensitive to up to the level whose estimated exceedance probability
   per actuation is below the target rate (the tail is extrapolated with a fitted distribution, see
   `_tail.py`; the fit, its bootstrap upper bound and the model-free bound are all reported).

What each debouncer is sensitive to, and the parameter that covers it (sufficient, conservative):

| debouncer | figure | covered when |
| --- | --- | --- |
| lockout n | bounce time | bounce <= n * Ts (the lockout ends after the contact settled) |
| stable n | longest excursion to the old state | excursion <= (n - 1) * Ts (it never holds n samples) |
| integrator n | time in the old state | total <= (n - 1) * Ts (roughly; excursions may gain a sample) |
| confirm make/brk | bounce time, make and break apart | bounce <= window * Ts |

Over the unit's life the actuations are split into windows of cycles and the same choice is made in each.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from benchlog.analysis._types import MAKE
from benchlog.design._actuations import BounceFigures, ChannelRecord, bounce_figures
from benchlog.design._debouncers import KINDS, replay_grid
from benchlog.design._runs import SampledRuns, sample_runs
from benchlog.design._score import Windows, score
from benchlog.design._tail import Tail, fit_tail, zero_event_bound
from benchlog.errors import DataError

FIGURE = {"lockout": "bounce", "stable": "longest", "integrator": "wrong", "confirm": "bounce"}
FIGURE_TEXT = {
    "bounce": "bounce time",
    "longest": "longest excursion to the old state",
    "wrong": "total time in the old state",
}
_OFFSET = {"lockout": 0, "stable": 1, "integrator": 1, "confirm": 0}
MAX_GRID = 64


@dataclass(frozen=True, slots=True)
class SweepPoint:
    debouncer: str
    make: int  # parameter in samples (lockout time, stable count, integrator ceiling, confirm make window)
    brk: int  # confirm break window (= make for the others)
    window_ms: float  # make * Ts
    brk_ms: float
    judged: int
    false: int
    missed: int
    delay_p50_ms: float
    delay_p99_ms: float
    delay_max_ms: float

    @property
    def clean(self) -> bool:
        return self.false == 0 and self.missed == 0


@dataclass(frozen=True, slots=True)
class Choice:
    """The recommended parameter of one debouncer, with its evidence."""

    debouncer: str
    point: SweepPoint | None  # None: nothing clean on the grid
    rate: float  # estimated false transitions per actuation (tail fit), NaN when no model
    rate_upper: float  # 95 % upper bound (bootstrap, or the zero-event bound without a model)
    zero_event_bound: float  # model-free 95 % bound from the clean recorded actuations
    figure: str
    tail_make: str
    tail_break: str
    note: str = ""


@dataclass(frozen=True, slots=True)
class LifeRow:
    cycle_lo: int
    cycle_hi: int
    actuations: int
    bounce_max_ms: float
    choices: dict[
        str, tuple[int, int, float]
    ]  # debouncer -> (make, brk, delay p99 ms); -1: none clean, -2: unbounded tail
    # (a NaN delay: the tail asks for more than the sweep replayed)


@dataclass(frozen=True, slots=True, eq=False)
class SoftwareDesign:
    ts_ns: int
    target_rate: float
    actuations: int
    sweeps: dict[str, list[SweepPoint]]
    choices: dict[str, Choice]
    life: list[LifeRow] = field(default_factory=list)


def _grid(n_max: int) -> np.ndarray:
    n_max = max(int(n_max), 1)
    if n_max <= MAX_GRID:
        return np.arange(1, n_max + 1)
    return np.unique(np.round(np.geomspace(1, n_max, MAX_GRID)).astype(int))


@dataclass(slots=True, eq=False)
class _Channel:
    rec: ChannelRecord
    runs: SampledRuns
    figs: BounceFigures
    judged: np.ndarray
    kind: np.ndarray
    cycle: np.ndarray
    part: np.ndarray  # life window of each judged actuation, -1 when not judged
    win: Windows
    cols: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))  # judged, by life window
    cuts: np.ndarray = field(default_factory=lambda: np.zeros(1, np.int64))  # each window's first in cols

    def set_parts(self, edges: np.ndarray) -> None:
        self.part = np.where(self.judged, np.searchsorted(edges, self.cycle, side="right") - 1, -1)
        judged = np.flatnonzero(self.part >= 0)
        self.cols = judged[np.argsort(self.part[judged], kind="stable")]
        self.cuts = np.searchsorted(self.part[self.cols], np.arange(len(edges)))


CELLS = 1 << 22  # parameter rows x actuations scored at once (about 50 bytes a cell at the peak)


@dataclass(frozen=True, slots=True, eq=False)
class _Tally:
    """What a sweep keeps of each parameter row: counts per life window of the judged actuations, and
    the delay over all of them. A night's rows x actuations matrices (8 units x 400,000 actuations x
    tens of rows) do not fit in memory, so rows are scored a block at a time and reduced to this."""

    judged: int
    false: np.ndarray  # rows x life windows
    missed: np.ndarray  # rows x life windows
    delay_ms: np.ndarray  # rows x 3: median, p99 and max over every judged actuation (NaN: none)
    part_p99_ms: np.ndarray | None  # rows x life windows: p99 of the delay in each (when asked)


def _tally(
    chans: list[_Channel], debouncer: str, params: list[tuple[int, int]], ts: int, n_parts: int, parts=False
) -> _Tally:
    """Score every (make, brk) parameter pair on every channel, `CELLS` at a time."""
    n_win = sum(len(ch.win) for ch in chans)
    block = max(1, CELLS // max(n_win, 1))
    part = np.concatenate([ch.part[ch.cols] for ch in chans])
    by_part = np.argsort(part, kind="stable")
    cuts = np.searchsorted(part[by_part], np.arange(n_parts + 1))
    rows = len(params)
    false = np.zeros((rows, n_parts), np.int64)
    missed = np.zeros((rows, n_parts), np.int64)
    delay = np.full((rows, 3), np.nan)
    part_p99 = np.full((rows, n_parts), np.nan) if parts else None
    for lo in range(0, rows, block):
        ps = params[lo : lo + block]
        k = len(ps)
        per_param = replay_grid([ch.runs for ch in chans], debouncer, ps)
        delays = []
        for c, ch in enumerate(chans):
            at = [per_param[i][c][0] for i in range(k)]
            s = score(
                ch.win,
                np.repeat(np.arange(k), [len(a) for a in at]),
                np.concatenate(at) * ts,
                np.concatenate([per_param[i][c][1] for i in range(k)]),
                np.full(k, ch.runs.value[0], np.int8),
            )
            del at
            for into, what in ((false, s.false), (missed, s.missed)):
                run = np.zeros((k, len(ch.cols) + 1), np.int64)
                np.cumsum(what[:, ch.cols], axis=1, out=run[:, 1:])
                into[lo : lo + k] += run[:, ch.cuts[1:]] - run[:, ch.cuts[:-1]]
            delays.append(s.delay_ns[:, ch.cols])
            del s
        del per_param
        d = np.concatenate(delays, axis=1)
        del delays
        for r in range(k):
            row = d[r]
            fin = row[np.isfinite(row)] / 1e6
            if len(fin):
                delay[lo + r, :2] = np.quantile(fin, [0.5, 0.99])
                delay[lo + r, 2] = fin.max()
            if part_p99 is not None:
                row = row[by_part]
                for p in range(n_parts):
                    seg = row[cuts[p] : cuts[p + 1]]
                    seg = seg[np.isfinite(seg)]
                    if len(seg):
                        part_p99[lo + r, p] = float(np.quantile(seg, 0.99)) / 1e6
    return _Tally(len(part), false, missed, delay, part_p99)


def _point(debouncer: str, m: int, b: int, ts: int, t: _Tally, row: int) -> SweepPoint:
    return SweepPoint(
        debouncer,
        int(m),
        int(b),
        m * ts / 1e6,
        b * ts / 1e6,
        t.judged,
        int(t.false[row].sum()),
        int(t.missed[row].sum()),
        float(t.delay_ms[row, 0]),
        float(t.delay_ms[row, 1]),
        float(t.delay_ms[row, 2]),
    )


_NEVER = 10**9  # a requirement no replay can meet (an unbounded fitted tail)


def _covering(debouncer: str, figure_ns: float, ts: int) -> int:
    if not math.isfinite(figure_ns) or figure_ns / ts > _NEVER:
        return _NEVER
    return max(1, int(math.ceil(figure_ns / ts - 1e-9)) + _OFFSET[debouncer])


def _fits(chans: list[_Channel], figure: str, part: int | None, cache: dict) -> tuple[Tail, Tail]:
    """The make and break tail fits of a figure over every judged actuation (`part` None) or over one
    life window; lockout and confirm share theirs, so each is made once (`cache`)."""
    if (figure, part) not in cache:
        out = []
        for kind in (True, False):
            vals = []
            for ch in chans:
                sel = (ch.part >= 0 if part is None else ch.part == part) & ((ch.kind == MAKE) == kind)
                vals.append(getattr(ch.figs, f"{figure}_ns")[sel])
            out.append(fit_tail(np.concatenate(vals) if vals else np.zeros(0)))
        cache[figure, part] = (out[0], out[1])
    return cache[figure, part]


def design_software(
    records: list[ChannelRecord],
    ts_ns: int,
    target_rate: float = 1e-6,
    debouncers: tuple[str, ...] = KINDS,
    life_windows: int = 4,
    max_samples: int | None = None,
    on_step: Callable[[str], None] | None = None,
) -> SoftwareDesign:
    """Sweep, recommend and follow over life each debouncer on the recorded channels (see module doc)."""
    ts = int(ts_ns)
    if ts <= 0:
        raise DataError("the sampling period must be positive")
    if not records:
        raise DataError("no recorded channel to design for")
    chans = []
    for rec in records:
        a = rec.actuations
        win = rec.windows
        runs = sample_runs(rec.t_ns, rec.level, ts, rec.initial, win.end[-1])
        chans.append(
            _Channel(rec, runs, bounce_figures(rec), win.judged, a["kind"], a["cycle"], np.zeros(0), win)
        )
    judged_all = np.concatenate([c.judged for c in chans])
    n_judged = int(judged_all.sum())
    if n_judged == 0:
        raise DataError("no complete actuation to judge a debouncer against")
    cycles = np.concatenate([c.cycle for c in chans])
    edges = _life_edges(cycles[judged_all], life_windows)
    for ch in chans:
        ch.set_parts(edges)
    n_parts = len(edges) - 1
    bounce_max = max(float(c.figs.bounce_ns[c.judged].max(initial=0.0)) for c in chans)
    quiet = np.concatenate([(c.win.end - c.rec.actuations["t_settle_ns"])[c.judged] for c in chans])
    quiet_samples = max(int(np.quantile(quiet, 0.01) // ts), 2)
    n_max = max_samples or max(int(math.ceil(1.5 * bounce_max / ts)) + 2, 4)
    caps = {"lockout": max(quiet_samples // 2, 1), "confirm": max(quiet_samples - 1, 1)}
    sweeps: dict[str, list[SweepPoint]] = {}
    fits: dict = {}
    choices: dict[str, Choice] = {}
    life_scores: dict[str, tuple[list[tuple[int, int]], _Tally]] = {}
    for deb in debouncers:
        if on_step is not None:
            on_step(deb)
        fit_m, fit_b = _fits(chans, FIGURE[deb], None, fits)
        need_all = max(_covering(deb, fit_m.isf(target_rate), ts), _covering(deb, fit_b.isf(target_rate), ts))
        top_n = n_max if max_samples else max(n_max, int(need_all * 1.25) + 2)
        grid = _grid(min(top_n, caps.get(deb, top_n), 4096))
        if deb == "confirm":
            top = int(grid[-1])
            params = [(int(m), top) for m in grid]
            s1 = _tally(chans, deb, params, ts, n_parts)
            pts = [_point(deb, m, b, ts, s1, i) for i, (m, b) in enumerate(params)]
            clean_m = [p.make for p in pts if p.false == 0 and p.missed == 0]
            make_rec = max(clean_m[0] if clean_m else top, _covering(deb, fit_m.isf(target_rate), ts))
            params2 = [(make_rec, int(b)) for b in grid]
            s2 = _tally(chans, deb, params2, ts, n_parts)
            pts += [_point(deb, m, b, ts, s2, i) for i, (m, b) in enumerate(params2)]
            clean_b = [b for i, (m, b) in enumerate(params2) if pts[len(params) + i].clean]
            brk_rec = _covering(deb, fit_b.isf(target_rate), ts)
            brk_rec = max(clean_b[0], brk_rec) if clean_b else None
            want = (make_rec, brk_rec) if clean_m and brk_rec is not None else None
            both = _Tally(
                n_judged,
                np.concatenate((s1.false, s2.false)),
                np.concatenate((s1.missed, s2.missed)),
                np.concatenate((s1.delay_ms, s2.delay_ms)),
                None,
            )
            life_scores[deb] = (params + params2, both)
        else:
            params = [(int(n), int(n)) for n in grid]
            s1 = _tally(chans, deb, params, ts, n_parts)
            pts = [_point(deb, m, b, ts, s1, i) for i, (m, b) in enumerate(params)]
            clean = [p.make for p in pts if p.clean]
            need = max(_covering(deb, fit_m.isf(target_rate), ts), _covering(deb, fit_b.isf(target_rate), ts))
            want = (max(clean[0], need),) * 2 if clean else None
            life_scores[deb] = (params, s1)
        sweeps[deb] = pts
        # physical limit: a lockout or confirm window longer than the shortest usual stable period
        limit = min(quiet_samples if deb in caps else 4096, 4096)
        choices[deb] = _choose(chans, deb, want, ts, fit_m, fit_b, n_parts, n_judged, target_rate, pts, limit)
    if on_step is not None:
        on_step("life windows")
    life = _life(chans, life_scores, edges, ts, target_rate, fits) if life_windows > 0 else []
    return SoftwareDesign(ts, target_rate, n_judged, sweeps, choices, life)


def _choose(chans, deb, want, ts, fit_m: Tail, fit_b: Tail, n_parts, n_judged, target, pts, limit) -> Choice:
    fig = FIGURE[deb]
    tails = (fit_m.describe(), fit_b.describe())

    def no_choice(note: str) -> Choice:
        return Choice(
            deb, None, np.nan, np.nan, zero_event_bound(n_judged), FIGURE_TEXT[fig], *tails, note=note
        )

    if want is None:
        return no_choice(f"no clean setting up to {pts[-1].window_ms:.3g} ms")
    m, b = want
    if max(m, b) > limit:  # more than the stable period allows (or an unbounded tail): no replay there
        asked = "more than any window" if max(m, b) >= _NEVER else f"{max(m, b) * ts / 1e6:g} ms"
        return no_choice(
            f"the fitted tail asks for {asked}, beyond {limit * ts / 1e6:g} ms (the stable period)"
        )
    point = None
    note = ""
    for extra in range(8):  # the sampled outcome is not strictly monotone: step up until clean
        mm, bb = m + extra, (b + extra if deb == "confirm" else m + extra)
        p = _point(deb, mm, bb, ts, _tally(chans, deb, [(mm, bb)], ts, n_parts), 0)
        if p.clean:
            point = p
            break
    if point is None:
        asked = f"{m * ts / 1e6:g} ms" if deb != "confirm" else f"{m * ts / 1e6:g} / {b * ts / 1e6:g} ms"
        return Choice(
            deb,
            None,
            np.nan,
            np.nan,
            zero_event_bound(n_judged),
            FIGURE_TEXT[fig],
            *tails,
            note=f"the tail asks for {asked}, where the replay is not clean (too slow for the cycle?)",
        )
    if extra:
        note = f"stepped up {extra} sample(s) to stay clean"
    xm = (point.make - _OFFSET[deb]) * ts
    xb = (point.brk - _OFFSET[deb]) * ts
    models = [t for t in (fit_m, fit_b) if t.model != "none"]
    rate = max(float(fit_m.sf(xm)), float(fit_b.sf(xb))) if models else np.nan
    upper = max(fit_m.sf_upper(xm), fit_b.sf_upper(xb))
    return Choice(deb, point, rate, upper, zero_event_bound(n_judged), FIGURE_TEXT[fig], *tails, note=note)


def _life_edges(cycles: np.ndarray, k: int) -> np.ndarray:
    """Cycle bounds of `k` life windows of equal cycle span over the judged actuations (one window
    when `k` is 0: the sweep still counts per window)."""
    lo, hi = int(cycles.min()), int(cycles.max())
    return np.unique(np.linspace(lo, hi + 1, max(k, 1) + 1).round().astype(np.int64))


def _life(chans, life_scores, edges, ts, target, fits: dict) -> list[LifeRow]:
    bounce = np.concatenate([c.figs.bounce_ns for c in chans])
    part = np.concatenate([c.part for c in chans])
    rows, delay_asked, chosen = [], {}, {}
    for p, (a, b) in enumerate(zip(edges[:-1], edges[1:], strict=True)):
        sel = part == p
        if not sel.any():
            continue
        choices = {}
        for deb, (params, t) in life_scores.items():
            clean = (t.false[:, p] == 0) & (t.missed[:, p] == 0)
            fit_m, fit_b = _fits(chans, FIGURE[deb], p, fits)
            need_m = _covering(deb, fit_m.isf(target), ts)
            need_b = _covering(deb, fit_b.isf(target), ts)
            ok = [
                i
                for i, (m, bb) in enumerate(params)
                if clean[i] and m >= need_m and (bb >= need_b if deb == "confirm" else m >= need_b)
            ]
            if not ok:
                # the tail asks for more than the sweep replayed: report the requirement, delay unknown
                clean_i = [i for i in range(len(params)) if clean[i]]
                if max(need_m, need_b) >= _NEVER:
                    choices[deb] = (-2, -2, np.nan)
                elif not clean_i:
                    choices[deb] = (-1, -1, np.nan)
                else:
                    m0, b0 = params[clean_i[0]]
                    choices[deb] = (
                        max(m0, need_m),
                        max(b0, need_b) if deb == "confirm" else max(m0, need_m, need_b),
                        np.nan,
                    )
                continue
            i = min(ok, key=lambda i: (params[i][0], params[i][1]))
            choices[deb] = (params[i][0], params[i][1], np.nan)
            delay_asked.setdefault(deb, set()).add(params[i])
            chosen.setdefault(p, []).append((deb, params[i]))
        rows.append((p, LifeRow(int(a), int(b) - 1, int(sel.sum()), float(bounce[sel].max()) / 1e6, choices)))
    # the delay of each chosen setting in its own window: those few settings are replayed again
    p99 = {}
    for deb, asked in delay_asked.items():
        asked = sorted(asked)
        t = _tally(chans, deb, asked, ts, len(edges) - 1, parts=True)
        p99.update({(deb, pair): t.part_p99_ms[r] for r, pair in enumerate(asked)})
    for p, row in rows:
        for deb, pair in chosen.get(p, []):
            row.choices[deb] = (*pair, float(p99[deb, pair][p]))
    return [row for _, row in rows]
