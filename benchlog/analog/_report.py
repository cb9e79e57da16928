"""One capture, everything `benchlog scope` shows: a JSON-ready document and the chart's data.

Kept in the stage (not the command) so the report and the dashboard can reuse it.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from benchlog.analog._capture import Capture, read_capture
from benchlog.analog._edges import Levels, drive_edges, fraction_levels, open_circuit_level
from benchlog.analog._measure import Measured, measure_capture
from benchlog.analog._plots import ChartData, chart_data
from benchlog.analog._rc import design_from_waveform
from benchlog.analog._sampler import DigitalInput, compare
from benchlog.analysis import (
    CHATTER,
    FREE_RUNNING,
    GLITCHY,
    INCOMPLETE,
    MISSED,
    NO_CHANGE,
    STUCK,
    VERDICT_NAMES,
    AnalysisSettings,
    load_spec,
    summarize,
)
from benchlog.design import find_input, format_si, load_thresholds
from benchlog.errors import DataError

RULE_SOURCE = "the rule of MIL-PRF-39016 / MIL-STD-202 method 310, from memory"
_FLAG_NAMES = (
    (INCOMPLETE, "incomplete"),
    (MISSED, "missed"),
    (STUCK, "stuck"),
    (FREE_RUNNING, "free-running"),
    (GLITCHY, "glitchy"),
    (CHATTER, "chatter"),
    (NO_CHANGE, "no-change"),
)


@dataclass(frozen=True, slots=True)
class ScopeOptions:
    channel: str | None = None
    drive_channel: str | None = None
    interval_s: float | None = None
    time_column: str | None = "auto"
    full_scale_v: float = 1.0
    open_v: float | None = None
    open_fraction: float = 0.9
    closed_fraction: float = 0.1
    levels: tuple[float, float] | None = None
    min_us: float = 10.0
    closed_high: bool = False
    spec: str | None = None
    settle_ms: float | None = None
    chatter_us: float | None = None
    input_name: str | None = None
    thresholds: str | None = None
    supply: float | None = None
    compare: bool = False
    sample_us: float = 1.0
    design: bool = False
    series_ohms: float = 10_000.0
    preferred: str = "E12"
    series_tol: float = 0.05
    cap_tol: float = 0.10
    supply_tol: float = 0.05
    margin_v: float = 0.2
    actuation: int | None = None


@dataclass(frozen=True, slots=True, eq=False)
class ScopeResult:
    document: dict
    chart: ChartData
    measured: Measured


def _f(x) -> float | None:
    x = float(x)
    return round(x, 6) if np.isfinite(x) else None


def _settings(opts: ScopeOptions, spec) -> AnalysisSettings:
    base = spec.settings() if spec is not None else AnalysisSettings(settle_ns=5_000_000)
    chatter = opts.chatter_us if opts.chatter_us is not None else (None if spec else max(opts.min_us, 0.001))
    return AnalysisSettings(
        settle_ns=round(opts.settle_ms * 1e6) if opts.settle_ms else base.settle_ns,
        chatter_threshold_ns=round(chatter * 1e3) if chatter else base.chatter_threshold_ns,
        glitch_floor_ns=0,  # the minimum durations already did that work, on the analog trace
        normally_closed=base.normally_closed,
    )


def _levels(cap: Capture, v: np.ndarray, opts: ScopeOptions) -> Levels:
    min_ns = opts.min_us * 1e3
    if opts.levels is not None:
        hi, lo = opts.levels
        return Levels(
            hi, lo, min_ns, min_ns, f"open above {hi:g} V, closed below {lo:g} V, held >= {opts.min_us:g} us"
        )
    # a trace high when closed (across a load) is reflected about this level, so it is the full level too
    v_open = opts.open_v if opts.open_v is not None else open_circuit_level(v, cap.source)
    return fraction_levels(v_open, opts.open_fraction, opts.closed_fraction, min_ns)


def _actuation_rows(rows: np.ndarray, t0_s: float) -> list[dict]:
    out = []
    for r in rows:
        out.append(
            {
                "kind": "make" if r["kind"] == 0 else "break",
                "t_first_ms": _f(r["t_first_ns"] / 1e6 + t0_s * 1e3) if r["t_first_ns"] >= 0 else None,
                "bounce_us": _f(r["bounce_us"]),
                "bounce_count": int(r["bounce_count"]),
                "longest_gap_us": _f(r["longest_gap_us"]),
                "chatter": int(r["chatter"]),
                "transit_us": _f(r["transit_us"]),
                "flags": [name for bit, name in _FLAG_NAMES if int(r["flags"]) & bit],
                "verdict": VERDICT_NAMES.get(int(r["verdict"]), "none"),
            }
        )
    return out


def scope_capture(path: str | Path, opts: ScopeOptions) -> ScopeResult:
    cap = read_capture(
        path, interval_s=opts.interval_s, time_column=opts.time_column, full_scale_v=opts.full_scale_v
    )
    drive_i = cap.channel(opts.drive_channel) if opts.drive_channel else None
    if opts.channel is not None:
        ci = cap.channel(opts.channel)
    else:
        ci = next((i for i in range(len(cap.names)) if i != drive_i), None)
        if ci is None:
            raise DataError(f"{cap.source}: no contact channel besides the drive channel")
    v = cap.volts[ci]
    spec = load_spec(opts.spec) if opts.spec else None
    settings = _settings(opts, spec)
    levels = _levels(cap, v, opts)
    measured = measure_capture(cap, ci, levels, settings, spec, drive_i, opts.closed_high)
    trace = (levels.v_open - v) if opts.closed_high and levels.v_open else v
    doc: dict = {
        "file": str(path),
        "channels": list(cap.names),
        "contact_channel": cap.names[ci],
        "drive_channel": cap.names[drive_i] if drive_i is not None else None,
        "samples": len(cap),
        "sample_interval_s": cap.dt_s,
        "even_samples": cap.t_s is None,
        "start_s": cap.t0_s,
        "end_s": cap.end_s,
        "levels": {
            "open_above_v": levels.open_above,
            "closed_below_v": levels.closed_below,
            "min_open_us": levels.min_open_ns / 1e3,
            "min_closed_us": levels.min_closed_ns / 1e3,
            "open_circuit_v": levels.v_open,
            "rule": levels.label,
            "source": RULE_SOURCE if opts.levels is None else "given",
        },
        "settings": {
            "settle_ms": settings.settle_ns / 1e6,
            "chatter_us": settings.chatter_threshold_ns / 1e3,
        },
        "edges": len(measured.edges),
        "actuations": _actuation_rows(measured.actuations, cap.t0_s),
        "summary": summarize(measured.actuations, spec) if len(measured.actuations) else [],
        "sampler": None,
        "rc": None,
    }
    tau = None
    chart_input: dict = {}
    if opts.compare or opts.design:
        row = find_input(load_thresholds(opts.thresholds), opts.input_name or "")
        supply = opts.supply or row.supply
        v_open = levels.v_open if levels.v_open is not None else supply
        (p_lo, p_hi), (m_lo, m_hi) = row.at_supply(supply)
        chart_input = {"input_levels": ((p_lo + p_hi) / 2, (m_lo + m_hi) / 2), "input_name": row.name}
        if opts.compare:
            inp = DigitalInput((p_lo + p_hi) / 2, (m_lo + m_hi) / 2, supply, opts.sample_us * 1e3, row.name)
            drives = drive_edges(cap, cap.volts[drive_i]) if drive_i is not None else None
            cmp = compare(cap, trace, measured, inp, settings, drives)
            doc["sampler"] = {
                "input": row.name,
                "vt_plus_v": inp.vt_plus,
                "vt_minus_v": inp.vt_minus,
                "supply_v": supply,
                "sample_us": opts.sample_us,
                "pairs": cmp.rows(),
                "summary": cmp.summary(),
            }
        if opts.design:
            d = design_from_waveform(
                cap,
                trace,
                measured,
                v_open,
                row,
                supply,
                r_series=opts.series_ohms,
                r_tol=opts.series_tol,
                c_tol=opts.cap_tol,
                supply_tol=opts.supply_tol,
                margin_v=opts.margin_v,
                series=opts.preferred,
            )
            doc["rc"] = {
                "input": row.name,
                "supply_v": supply,
                "series_ohms": opts.series_ohms,
                "corners": d.corners_per_candidate,
                "actuations_judged": len(d.windows.starts),
                "chosen": _score(d.chosen) if d.chosen else None,
                "table": [_score(s) for s in d.table],
            }
            if d.chosen is not None:
                tau = d.chosen.r * d.chosen.c
                chart_input["rc_label"] = f"{format_si(d.chosen.r, 'ohm')}, {format_si(d.chosen.c, 'F')}"
    actuation = None if opts.actuation is None else opts.actuation - 1
    chart = chart_data(cap, trace, measured, tau_s=tau, actuation=actuation, **chart_input)
    return ScopeResult(doc, chart, measured)


def _score(s) -> dict:
    return {
        "series_ohms": s.r,
        "cap_farads": s.c,
        "tau_ms": s.r * s.c * 1e3,
        "false_transitions": s.false_transitions,
        "missed": s.missed,
        "margin_v": _f(s.margin_v),
        "delay_make_us": _f(s.delay_make_us),
        "delay_break_us": _f(s.delay_break_us),
        "passes": s.passes,
    }
