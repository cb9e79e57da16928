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
from benchlog.design._score import Score, score
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


def _score_params(chans: list[_Channel], debouncer: str, params: list[tuple[int, int]], ts: int) -> Score:
    """Score every (make, brk) parameter pair (rows) on every channel (windows concatenated)."""
    per_param = replay_grid([ch.runs for ch in chans], debouncer, params)
    parts = []
    for c, ch in enumerate(chans):
        rows, ts_all, vals = [], [], []
        for i in range(len(params)):
            at, v = per_param[i][c]
            rows.append(np.full(len(at), i))
            ts_all.append(at * ts)
            vals.append(v)
        init = np.full(len(params), ch.runs.value[0], np.int8)
        parts.append(
            score(ch.rec.windows, np.concatenate(rows), np.concatenate(ts_all), np.concatenate(vals), init)
        )
    return Score(*(np.concatenate([getattr(p, f) for p in parts], axis=1) for f in Score.__slots__))


def _point(debouncer: str, m: int, b: int, ts: int, s: Score, row: int, sel: np.ndarray) -> SweepPoint:
    d = s.delay_ns[row, sel]
    d = d[np.isfinite(d)] / 1e6
    q = np.quantile(d, [0.5, 0.99]) if len(d) else [np.nan, np.nan]
    return SweepPoint(
        debouncer,
        int(m),
        int(b),
        m * ts / 1e6,
        b * ts / 1e6,
        int(sel.sum()),
        int(s.false[row, sel].sum()),
        int(s.missed[row, sel].sum()),
        float(q[0]),
        float(q[1]),
        float(d.max()) if len(d) else np.nan,
    )


_NEVER = 10**9  # a requirement no replay can meet (an unbounded fitted tail)


def _covering(debouncer: str, figure_ns: float, ts: int) -> int:
    if not math.isfinite(figure_ns) or figure_ns / ts > _NEVER:
        return _NEVER
    return max(1, int(math.ceil(figure_ns / ts - 1e-9)) + _OFFSET[debouncer])


def _fits(chans: list[_Channel], figure: str, mask_fn=None) -> tuple[Tail, Tail]:
    out = []
    for kind in (True, False):
        vals = []
        for ch in chans:
            sel = ch.judged & ((ch.kind == MAKE) == kind)
            if mask_fn is not None:
                sel &= mask_fn(ch)
            vals.append(getattr(ch.figs, f"{figure}_ns")[sel])
        out.append(fit_tail(np.concatenate(vals) if vals else np.zeros(0)))
    return out[0], out[1]


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
        runs = sample_runs(rec.t_ns, rec.level, ts, rec.initial, rec.windows.end[-1])
        chans.append(_Channel(rec, runs, bounce_figures(rec), rec.windows.judged, a["kind"], a["cycle"]))
    judged_all = np.concatenate([c.judged for c in chans])
    n_judged = int(judged_all.sum())
    if n_judged == 0:
        raise DataError("no complete actuation to judge a debouncer against")
    bounce_max = max(float(c.figs.bounce_ns[c.judged].max(initial=0.0)) for c in chans)
    quiet = np.concatenate([(c.rec.windows.end - c.rec.actuations["t_settle_ns"])[c.judged] for c in chans])
    quiet_samples = max(int(np.quantile(quiet, 0.01) // ts), 2)
    n_max = max_samples or max(int(math.ceil(1.5 * bounce_max / ts)) + 2, 4)
    caps = {"lockout": max(quiet_samples // 2, 1), "confirm": max(quiet_samples - 1, 1)}
    kinds = np.concatenate([c.kind for c in chans])
    cycles = np.concatenate([c.cycle for c in chans])
    sweeps: dict[str, list[SweepPoint]] = {}
    choices: dict[str, Choice] = {}
    life_scores: dict[str, tuple[list[tuple[int, int]], Score]] = {}
    for deb in debouncers:
        if on_step is not None:
            on_step(deb)
        fit_m, fit_b = _fits(chans, FIGURE[deb])
        need_all = max(_covering(deb, fit_m.isf(target_rate), ts), _covering(deb, fit_b.isf(target_rate), ts))
        top_n = n_max if max_samples else max(n_max, int(need_all * 1.25) + 2)
        grid = _grid(min(top_n, caps.get(deb, top_n), 4096))
        if deb == "confirm":
            top = int(grid[-1])
            params = [(int(m), top) for m in grid]
            s1 = _score_params(chans, deb, params, ts)
            pts = [_point(deb, m, b, ts, s1, i, judged_all) for i, (m, b) in enumerate(params)]
            clean_m = [p.make for p in pts if p.false == 0 and p.missed == 0]
            make_rec = max(clean_m[0] if clean_m else top, _covering(deb, fit_m.isf(target_rate), ts))
            params2 = [(make_rec, int(b)) for b in grid]
            s2 = _score_params(chans, deb, params2, ts)
            pts += [_point(deb, m, b, ts, s2, i, judged_all) for i, (m, b) in enumerate(params2)]
            clean_b = [b for i, (m, b) in enumerate(params2) if pts[len(params) + i].clean]
            brk_rec = _covering(deb, fit_b.isf(target_rate), ts)
            brk_rec = max(clean_b[0], brk_rec) if clean_b else None
            want = (make_rec, brk_rec) if clean_m and brk_rec is not None else None
            life_scores[deb] = (
                params + params2,
                Score(*(np.concatenate((getattr(s1, f), getattr(s2, f))) for f in Score.__slots__)),
            )
        else:
            params = [(int(n), int(n)) for n in grid]
            s1 = _score_params(chans, deb, params, ts)
            pts = [_point(deb, m, b, ts, s1, i, judged_all) for i, (m, b) in enumerate(params)]
            clean = [p.make for p in pts if p.clean]
            need = max(_covering(deb, fit_m.isf(target_rate), ts), _covering(deb, fit_b.isf(target_rate), ts))
            want = (max(clean[0], need),) * 2 if clean else None
            life_scores[deb] = (params, s1)
        sweeps[deb] = pts
        # physical limit: a lockout or confirm window longer than the shortest usual stable period
        limit = min(quiet_samples if deb in caps else 4096, 4096)
        choices[deb] = _choose(
            chans, deb, want, ts, fit_m, fit_b, judged_all, n_judged, target_rate, pts, limit
        )
    if on_step is not None:
        on_step("life windows")
    life = _life(chans, life_scores, judged_all, kinds, cycles, ts, target_rate, life_windows)
    return SoftwareDesign(ts, target_rate, n_judged, sweeps, choices, life)


def _choose(
    chans, deb, want, ts, fit_m: Tail, fit_b: Tail, judged_all, n_judged, target, pts, limit
) -> Choice:
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
        s = _score_params(chans, deb, [(mm, bb)], ts)
        p = _point(deb, mm, bb, ts, s, 0, judged_all)
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


def _life(chans, life_scores, judged_all, kinds, cycles, ts, target, k) -> list[LifeRow]:
    if k <= 0:
        return []
    lo, hi = int(cycles[judged_all].min()), int(cycles[judged_all].max())
    edges = np.unique(np.linspace(lo, hi + 1, k + 1).round().astype(np.int64))
    bounce = np.concatenate([c.figs.bounce_ns for c in chans])
    rows = []
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        sel = judged_all & (cycles >= a) & (cycles < b)
        if not sel.any():
            continue
        choices = {}
        for deb, (params, s) in life_scores.items():
            clean = (s.false[:, sel].sum(axis=1) == 0) & (s.missed[:, sel].sum(axis=1) == 0)
            fit_m, fit_b = _fits(chans, FIGURE[deb], lambda ch, a=a, b=b: (ch.cycle >= a) & (ch.cycle < b))
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
            d = s.delay_ns[i, sel]
            d = d[np.isfinite(d)]
            choices[deb] = (
                params[i][0],
                params[i][1],
                float(np.quantile(d, 0.99)) / 1e6 if len(d) else np.nan,
            )
        rows.append(LifeRow(int(a), int(b) - 1, int(sel.sum()), float(bounce[sel].max()) / 1e6, choices))
    return rows
