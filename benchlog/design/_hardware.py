"""Choosing R and C in front of a Schmitt input from recorded actuations, checked at tolerance corners.

A candidate (series R, capacitor C) with a pull-up (external with a tolerance, or an internal one given as
a range) is replayed exactly (`_rc.py`) on every recorded contact sequence at every corner of the
tolerances: pull-up, series R and C each at their low and high ends, the supply at both ends, VT+ and VT-
each at both ends of their range (with VT- kept at least the guaranteed hysteresis below VT+). Scored per
actuation like a firmware debouncer (`_score.py`):

- a bounce *passes through* when the input changes back during the actuation (a false transition);
- the *margin* is how far the node stayed from the other threshold after the input had switched: for a
  make, VT+ minus the highest the node rose again during the rest of the bounce; for a break, the lowest
  it fell again minus VT-. An actuation whose bounce was over before the input switched has no margin
  to report (its bounce never reached the input);
- the *delay* is the input's change minus the contact's first transition (press = make, release = break).

A candidate passes when, at every corner, nothing passes through, nothing is missed and every margin is at
least the asked margin. The search screens candidates on the worst recorded actuations (top by bounce
time, longest excursion and time in the old state), each replayed from a settled node, then confirms the
choice on every recorded actuation at every corner.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field

import numpy as np

from benchlog.analysis._types import MAKE
from benchlog.design._actuations import ChannelRecord, bounce_figures
from benchlog.design._eseries import preferred_values
from benchlog.design._rc import Networks, schmitt
from benchlog.design._score import Windows, score
from benchlog.design._thresholds import InputThresholds
from benchlog.errors import ConfigError, DataError

_CHUNK = 1_500_000  # rows x edges per replay (bounds the memory of one replay to ~200 MB)


@dataclass(frozen=True, slots=True)
class Circuit:
    """Everything but the candidate R and C. Tolerances are fractions (0.05 = 5 %)."""

    supply: float
    supply_tol: float
    pullup: tuple[float, float]  # ohms, low and high end (an external resistor: nominal -+ tolerance)
    r_tol: float  # series resistor tolerance
    c_tol: float  # capacitor tolerance
    thresholds: InputThresholds

    def corners(self, rs: float, c: float) -> Networks:
        """Row 0: nominal; then every corner."""
        vdd_nom = self.supply
        vtp_r, vtm_r = self.thresholds.at_supply(vdd_nom)
        nominal = (
            vdd_nom,
            float(np.sqrt(self.pullup[0] * self.pullup[1])),
            rs,
            c,
            float(np.mean(vtp_r)),
            float(np.mean(vtm_r)),
        )
        rows = [nominal]
        for vdd, rp, rr, cc, i_tp, i_tm in itertools.product(
            (vdd_nom * (1 - self.supply_tol), vdd_nom * (1 + self.supply_tol)),
            self.pullup,
            (rs * (1 - self.r_tol), rs * (1 + self.r_tol)),
            (c * (1 - self.c_tol), c * (1 + self.c_tol)),
            (0, 1),
            (0, 1),
        ):
            vtp, vtm = self.thresholds.at_supply(vdd)
            rows.append((vdd, rp, rr, cc, vtp[i_tp], vtm[i_tm]))
        arr = np.unique(np.array(rows[1:]), axis=0)
        arr = np.vstack((np.array(nominal)[None, :], arr))
        vtp, vtm = arr[:, 4], arr[:, 5]
        vtm = np.minimum(vtm, vtp - self.thresholds.hysteresis_min)
        return Networks.of(arr[:, 0], arr[:, 1], arr[:, 2], arr[:, 3], vtp, vtm)


@dataclass(frozen=True, slots=True)
class RCCheck:
    """One candidate replayed on the recorded actuations (row 0 = nominal values, the rest = corners)."""

    series: float
    cap: float
    corners: int
    actuations: int
    false_nominal: int
    false_worst: int  # summed over actuations, the worst corner
    missed_worst: int
    margin_nominal_v: float  # smallest margin at nominal values (NaN: no bounce reached the input)
    margin_worst_v: float  # smallest margin at any corner
    press_ms: tuple[float, float, float]  # nominal p50, p99, max
    release_ms: tuple[float, float, float]
    press_worst_ms: float  # max over corners and actuations
    release_worst_ms: float
    passes: bool
    worst: tuple[int, int]  # (record index, actuation index) closest to passing a bounce through, nominal

    @property
    def delay_worst_ms(self) -> float:
        return max(self.press_worst_ms, self.release_worst_ms)


@dataclass(frozen=True, slots=True, eq=False)
class RCDesign:
    circuit: Circuit
    series_name: str
    min_margin_v: float
    tradeoff: list[RCCheck]  # screened candidates, confirmed ones marked by `passes`
    chosen: RCCheck | None
    note: str = ""
    tried: list[float] = field(default_factory=list)


def _windows_margins(rec: ChannelRecord, net: Networks, windows: Windows):
    ch = schmitt(net, rec.t_ns, rec.level, rec.initial)
    sc = score(windows, ch.row, np.round(ch.t_ns).astype(np.int64), ch.new, ch.initial)
    t = rec.t_ns
    w = np.searchsorted(windows.start, t, side="left") - 1  # edges strictly after a window's start
    ok = (w >= 0) & (t <= windows.end[np.maximum(w, 0)])
    k = np.flatnonzero(ok)
    wk = w[k]
    nwin = len(windows)
    make = windows.target == 1
    margin = np.full((len(net), nwin), np.nan)
    if len(k):
        good_at = sc.good_at_ns[:, wk]  # rows x edges
        after = t[k][None, :] > good_at  # NaN compares False
        v = ch.v_edges[:, k]
        sign = np.where(make[wk], 1.0, -1.0)[None, :]
        vals = np.where(after, sign * v, -np.inf)
        starts = np.flatnonzero(np.concatenate(([True], wk[1:] != wk[:-1])))
        peak = np.maximum.reduceat(vals, starts, axis=1)
        wins = wk[starts]
        vtp, vtm = net.vt_plus[:, None], net.vt_minus[:, None]
        m = np.where(make[wins][None, :], vtp - peak, -peak - vtm)
        margin[:, wins] = np.where(np.isfinite(peak), m, np.nan)
    return sc, margin


def check_rc(
    records: list[ChannelRecord],
    circuit: Circuit,
    series: float,
    cap: float,
    min_margin_v: float,
    windows: list[Windows] | None = None,
) -> RCCheck:
    """Replay one candidate on `records` at nominal values and every corner."""
    net = circuit.corners(series, cap)
    if windows is None:
        windows = [r.windows for r in records]
    falses, misses, margins, press, release, worst_idx = [], [], [], [], [], []
    for ri, (rec, win) in enumerate(zip(records, windows, strict=True)):
        step = max(1, _CHUNK // max(len(rec.t_ns), 1))
        sc_parts, m_parts = [], []
        for lo in range(0, len(net), step):
            sc, m = _windows_margins(rec, net.take(slice(lo, lo + step)), win)
            sc_parts.append(sc)
            m_parts.append(m)
        j = win.judged
        false = np.concatenate([s.false for s in sc_parts])[:, j]
        missed = np.concatenate([s.missed for s in sc_parts])[:, j]
        delay = np.concatenate([s.delay_ns for s in sc_parts])[:, j]
        margin = np.concatenate(m_parts)[:, j]
        falses.append(false)
        misses.append(missed)
        margins.append(margin)
        mk = (win.target == 1)[j]
        press.append(delay[:, mk])
        release.append(delay[:, ~mk])
        idx = np.flatnonzero(j)
        worst_idx.extend((ri, int(i)) for i in idx)
    false = np.concatenate(falses, axis=1)
    missed = np.concatenate(misses, axis=1)
    margin = np.concatenate(margins, axis=1)
    press_d = np.concatenate(press, axis=1) / 1e6
    release_d = np.concatenate(release, axis=1) / 1e6
    if false.shape[1] == 0:
        raise DataError("no complete actuation to check a filter against")

    def stats(d):
        x = d[np.isfinite(d)]
        return (
            (float(np.quantile(x, 0.5)), float(np.quantile(x, 0.99)), float(x.max()))
            if len(x)
            else (np.nan, np.nan, np.nan)
        )

    def nanmin(x):
        x = x[np.isfinite(x)]
        return float(x.min()) if len(x) else np.nan

    def nanmax(x):
        x = x[np.isfinite(x)]
        return float(x.max()) if len(x) else np.nan

    # the worst actuation at nominal values: a pass-through first, then the smallest margin
    key = np.where(false[0] > 0, -1e9 - false[0], np.nan_to_num(margin[0], nan=1e9))
    worst = worst_idx[int(np.argmin(key))]
    m_worst = nanmin(margin)
    ok_margin = not np.isfinite(m_worst) or m_worst >= min_margin_v
    passes = bool(false.sum(axis=1).max() == 0 and missed.sum(axis=1).max() == 0 and ok_margin)
    return RCCheck(
        float(series),
        float(cap),
        len(net) - 1,
        int(false.shape[1]),
        int(false[0].sum()),
        int(false.sum(axis=1).max()),
        int(missed.sum(axis=1).max()),
        nanmin(margin[0]),
        m_worst,
        stats(press_d[0]),
        stats(release_d[0]),
        nanmax(press_d),
        nanmax(release_d),
        passes,
        worst,
    )


def screened(records: list[ChannelRecord], per_figure: int = 24) -> tuple[list[ChannelRecord], list[Windows]]:
    """The worst actuations of each record, each as its own window after a settled stretch."""
    out, wins = [], []
    gap = 10**9
    for rec in records:
        figs = bounce_figures(rec)
        w = rec.windows
        a = rec.actuations
        pick = set()
        for kind in (True, False):
            cand = np.flatnonzero(w.judged & ((a["kind"] == MAKE) == kind))
            for fig in (figs.bounce_ns, figs.longest_ns, figs.wrong_ns):
                top = cand[np.argsort(-fig[cand], kind="stable")[:per_figure]]
                pick.update(int(i) for i in top)
        if not pick:
            continue
        idx = np.array(sorted(pick))
        ts, lvs, starts, ends, rows = [], [], [], [], []
        offset = gap
        for i in idx:
            lo, hi = int(w.start[i]), int(w.end[i])
            sel = (rec.t_ns >= lo) & (rec.t_ns < hi)
            before = 1 - int(w.target[i])
            ts.append(np.concatenate(([offset - gap // 2], rec.t_ns[sel] - lo + offset)))
            lvs.append(np.concatenate(([before], rec.level[sel])))
            starts.append(offset)
            ends.append(offset + hi - lo)
            rows.append(a[i])
            offset += hi - lo + gap
        acts = np.array(rows, dtype=a.dtype)
        shift = np.array(starts) - acts["t_first_ns"]
        acts["t_first_ns"] += shift
        acts["t_settle_ns"] += shift
        acts["t_start_ns"] += shift
        sub = ChannelRecord(
            rec.channel,
            np.concatenate(ts),
            np.concatenate(lvs).astype(np.int8),
            acts,
            int(1 - w.target[idx[0]]),
            int(ends[-1]),
        )
        out.append(sub)
        wins.append(
            Windows(
                np.array(starts, np.int64),
                np.array(ends, np.int64),
                w.target[idx].copy(),
                np.ones(len(idx), bool),
            )
        )
    return out, wins


def series_limit(circuit: Circuit, min_margin_v: float) -> float:
    """Largest series R that still pulls the node below VT- (with margin) at the worst corner."""
    vdd_hi = circuit.supply * (1 + circuit.supply_tol)
    vdd_lo = circuit.supply * (1 - circuit.supply_tol)
    vtm = min(circuit.thresholds.at_supply(vdd_lo)[1][0], circuit.thresholds.at_supply(vdd_hi)[1][0])
    f = (vtm - min_margin_v) / vdd_hi
    if f <= 0:
        raise ConfigError(
            f"the input's lowest VT- ({vtm:.2f} V) leaves no room for a {min_margin_v} V margin"
        )
    return circuit.pullup[0] * f / (1 - f) / (1 + circuit.r_tol)


def design_rc(
    records: list[ChannelRecord],
    circuit: Circuit,
    series: str | float = "auto",
    series_name: str = "E12",
    cap_range: tuple[float, float] = (1e-10, 1e-4),
    min_margin_v: float = 0.2,
    extra_steps: int = 3,
) -> RCDesign:
    """Search preferred values for the series R (unless given) and C; confirm on all data (module doc)."""
    if not records:
        raise DataError("no recorded channel to design for")
    caps = preferred_values(series_name, *cap_range)
    r_max = series_limit(circuit, min_margin_v)
    if isinstance(series, str):
        if series != "auto":
            raise ConfigError(f"series resistor must be a value in ohms, 'none' or 'auto', got {series!r}")
        rs_all = preferred_values(series_name, 100.0, max(r_max, 100.0))
        rs_all = rs_all[rs_all <= r_max]
        if len(rs_all) > 10:
            rs_all = rs_all[np.unique(np.linspace(0, len(rs_all) - 1, 10).round().astype(int))]
        rs_list = [0.0, *rs_all.tolist()]
    else:
        if series > r_max:
            raise ConfigError(
                f"a {series:g} ohm series resistor keeps the closed input above VT- at the "
                f"low pull-up corner (at most {r_max:.0f} ohm)"
            )
        rs_list = [float(series)]
    subs, sub_wins = screened(records)
    quiet = np.concatenate([(r.windows.end - r.actuations["t_settle_ns"])[r.windows.judged] for r in records])
    quiet_s = float(np.quantile(quiet, 0.01)) / 1e9 if len(quiet) else 1.0
    tradeoff: list[RCCheck] = []
    for rs in rs_list:
        # search bound: one charging time constant within the shortest usual stable period (slower
        # candidates miss actuations; the replay still checks every candidate for that)
        c_max = quiet_s / (circuit.pullup[1] * (1 + circuit.c_tol))
        lo, hi = 0, int(np.searchsorted(caps, c_max, side="right")) - 1
        if hi < 0:
            continue

        def ok(i, rs=rs):
            return check_rc(subs, circuit, rs, float(caps[i]), min_margin_v, sub_wins)

        top = ok(hi)
        if top.false_worst > 0 or (np.isfinite(top.margin_worst_v) and top.margin_worst_v < min_margin_v):
            continue
        while lo < hi:  # smallest C with nothing passing through, with margin, on the screened data
            mid = (lo + hi) // 2
            m = ok(mid)
            if m.false_worst == 0 and (not np.isfinite(m.margin_worst_v) or m.margin_worst_v >= min_margin_v):
                hi = mid
            else:
                lo = mid + 1
        for i in range(lo, min(lo + 1 + extra_steps, len(caps))):
            c = ok(i)
            if c.missed_worst == 0:
                tradeoff.append(c)
    tradeoff.sort(key=lambda c: (c.delay_worst_ms, c.series, c.cap))
    tried = []
    for cand in [c for c in tradeoff if c.passes][:6]:
        full = check_rc(records, circuit, cand.series, cand.cap, min_margin_v)
        tried.append(cand.cap)
        tradeoff[tradeoff.index(cand)] = full
        if full.passes:
            return RCDesign(circuit, series_name, min_margin_v, tradeoff, full, tried=tried)
    note = (
        "no candidate rejects every recorded bounce at every corner"
        if tradeoff
        else ("no series R and C in range rejects the recorded bounce at every corner")
    )
    return RCDesign(circuit, series_name, min_margin_v, tradeoff, None, note, tried)
