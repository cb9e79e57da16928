"""Sampler against truth: what a digital input would have recorded from a capture, beside the voltage
definitions, actuation by actuation.

The digital input is a comparator with thresholds VT+ / VT- (equal for an input without hysteresis) read
by a sampler every `sample_ns`: it records the input's state at each sample instant and nothing between,
so a pulse shorter than a sample interval can vanish and every edge moves to the next sample instant.
It has no minimum duration. The input sees the capture's waveform scaled to its own supply (its pull-up
goes to that supply: `v / v_open * supply`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from benchlog.analog._capture import Capture
from benchlog.analog._edges import Edges, _cross_time, _states
from benchlog.analog._measure import Measured, analyse_edges
from benchlog.analysis import INCOMPLETE, MISSED, AnalysisSettings


@dataclass(frozen=True, slots=True)
class DigitalInput:
    """A sampler input: thresholds in volts at `supply`, and its sample interval."""

    vt_plus: float
    vt_minus: float
    supply: float
    sample_ns: float
    label: str = ""


def sampled_edges(
    cap: Capture, v: np.ndarray, v_open: float, inp: DigitalInput, phase_ns: float = 0.0
) -> Edges:
    """Edges as the sampler would record them: the comparator's changes, moved to the next sample instant;
    changes within one sample interval leave only the state at that instant."""
    scaled = v * (inp.supply / v_open)
    lo = inp.vt_minus if inp.vt_minus < inp.vt_plus else np.nextafter(inp.vt_plus, -np.inf)
    k, lvl, initial = _states(scaled, inp.vt_plus, lo)
    if not len(k):
        return Edges(np.zeros(0), np.zeros(0, np.uint8), initial)
    t = np.where(lvl == 0, _cross_time(cap, scaled, k, inp.vt_plus), _cross_time(cap, scaled, k, lo))
    ts = inp.sample_ns * 1e-9
    origin = cap.t0_s + phase_ns * 1e-9
    q = np.ceil((t - origin) / ts - 1e-9).astype(np.int64)
    seen = origin + q * ts <= cap.end_s + 1e-15  # a change after the last sample instant is never read
    q, lvl = q[seen], lvl[seen]
    if not len(q):
        return Edges(np.zeros(0), np.zeros(0, np.uint8), initial)
    last_of_sample = np.append(q[1:] != q[:-1], True)
    q, lvl = q[last_of_sample], lvl[last_of_sample]
    prev = np.empty_like(lvl)
    prev[0] = initial
    prev[1:] = lvl[:-1]
    change = lvl != prev
    return Edges(origin + q[change] * ts, lvl[change], initial)


@dataclass(frozen=True, slots=True, eq=False)
class Comparison:
    """Actuations by the voltage definitions (`truth`) beside the sampler's (`sampled`), paired by kind and
    first transition; `pairs` holds (truth index, sampled index or -1)."""

    truth: np.ndarray
    sampled: np.ndarray
    pairs: np.ndarray
    unmatched_sampled: int
    sampler: DigitalInput

    def rows(self) -> list[dict]:
        out = []
        for i, j in self.pairs:
            a = self.truth[i]
            b = self.sampled[j] if j >= 0 else None
            row = {
                "kind": "make" if a["kind"] == 0 else "break",
                "t_first_ms": float(a["t_first_ns"]) / 1e6,
                "bounce_us": [_f(a["bounce_us"]), _f(b["bounce_us"]) if b is not None else None],
                "bounce_count": [int(a["bounce_count"]), int(b["bounce_count"]) if b is not None else None],
                "chatter": [int(a["chatter"]), int(b["chatter"]) if b is not None else None],
            }
            out.append(row)
        return out

    def summary(self) -> dict:
        ok = self.pairs[:, 1] >= 0
        a = self.truth[self.pairs[ok, 0]]
        b = self.sampled[self.pairs[ok, 1]]
        d_bounce = b["bounce_us"] - a["bounce_us"]
        d_bounce = d_bounce[np.isfinite(d_bounce)]
        return {
            "actuations": int(len(self.truth)),
            "matched": int(ok.sum()),
            "missing_in_sampler": int((~ok).sum()),
            "extra_in_sampler": int(self.unmatched_sampled),
            "bounce_us_difference": {
                "mean": _f(d_bounce.mean()) if len(d_bounce) else None,
                "min": _f(d_bounce.min()) if len(d_bounce) else None,
                "max": _f(d_bounce.max()) if len(d_bounce) else None,
            },
            "bounce_count": [
                int(a["bounce_count"].clip(min=0).sum()),
                int(b["bounce_count"].clip(min=0).sum()),
            ],
            "chatter": [int(a["chatter"].clip(min=0).sum()), int(b["chatter"].clip(min=0).sum())],
        }


def _f(x) -> float | None:
    x = float(x)
    return x if np.isfinite(x) else None


def _usable(rows: np.ndarray) -> np.ndarray:
    return rows[(rows["flags"] & (INCOMPLETE | MISSED)) == 0]


def compare(
    cap: Capture,
    v: np.ndarray,
    truth: Measured,
    inp: DigitalInput,
    settings: AnalysisSettings,
    drives: Edges | None = None,
) -> Comparison:
    """Measure what `inp` would have recorded and pair it with the voltage definitions' actuations."""
    v_open = truth.levels.v_open
    if v_open is None:
        v_open = inp.supply  # thresholds given in volts: the trace is taken as the input's own voltage
    sampled_e = sampled_edges(cap, v, v_open, inp)
    sampled = analyse_edges(cap, sampled_e, settings, drives=drives)
    t_rows = _usable(truth.actuations)
    s_rows = _usable(sampled)
    pairs = np.full((len(t_rows), 2), -1, np.int64)
    pairs[:, 0] = np.arange(len(t_rows))
    used = np.zeros(len(s_rows), bool)
    tol = settings.quiet
    for kind in (0, 1):
        ti = np.flatnonzero(t_rows["kind"] == kind)
        si = np.flatnonzero(s_rows["kind"] == kind)
        if not len(ti) or not len(si):
            continue
        ts = s_rows["t_first_ns"][si]
        pos = np.clip(np.searchsorted(ts, t_rows["t_first_ns"][ti]), 0, len(si) - 1)
        left = np.maximum(pos - 1, 0)
        near_left = np.abs(ts[left] - t_rows["t_first_ns"][ti]) < np.abs(ts[pos] - t_rows["t_first_ns"][ti])
        best = np.where(near_left, left, pos)
        close = np.abs(ts[best] - t_rows["t_first_ns"][ti]) <= tol
        first_use = np.ones(len(best), bool)
        _, first = np.unique(best, return_index=True)
        first_use[:] = False
        first_use[first] = True
        ok = close & first_use
        pairs[ti[ok], 1] = si[best[ok]]
        used[si[best[ok]]] = True
    return Comparison(t_rows, s_rows, pairs, int((~used).sum()), inp)
