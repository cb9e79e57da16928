"""The qualification report: one self-contained HTML file (styles inline, figures as base64 PNG).

Every name that came from a user or a bench (part numbers, lot codes, serials, suppliers, failure modes,
incident details, notes, the spec text) goes through `html.escape`.
"""

from __future__ import annotations

import base64
import math
from datetime import UTC, datetime
from html import escape

import numpy as np

from benchlog import __version__
from benchlog.errors import DataError
from benchlog.stats import FAIL, METRICS, PASS, UNDECIDED, Qualification, fit_weibull
from benchlog.store import SUMMARY_WINDOW
from benchlog.views.report._data import LotData
from benchlog.views.report._plots import COLOURS, ecdf_png, trend_png, weibull_png

__all__ = ["render_report"]

_CSS = """
body { font: 14px/1.45 system-ui, -apple-system, "Segoe UI", sans-serif; color: #1d2429; margin: 0;
       background: #f4f5f7; }
main { max-width: 1040px; margin: 0 auto; padding: 24px 32px 48px; background: #fff; }
h1 { font-size: 24px; margin: 0 0 4px; } h2 { font-size: 18px; margin: 32px 0 8px;
     border-bottom: 2px solid #e3e6ea; padding-bottom: 4px; } h3 { font-size: 15px; margin: 20px 0 6px; }
.sub { color: #5b6670; margin: 0 0 16px; }
.banner { border-radius: 6px; padding: 14px 18px; font-size: 18px; font-weight: 600; margin: 16px 0; }
.banner small { display: block; font-size: 13px; font-weight: 400; margin-top: 4px; }
.b-pass { background: #e4f3e6; border-left: 6px solid #2e7d32; }
.b-fail { background: #fbe6e4; border-left: 6px solid #c62828; }
.b-undecided { background: #fdf3dc; border-left: 6px solid #c98a00; }
table { border-collapse: collapse; width: 100%; margin: 6px 0 12px; font-size: 13px; }
th, td { text-align: left; padding: 5px 8px; border-bottom: 1px solid #e3e6ea; vertical-align: top; }
th { background: #f0f2f4; font-weight: 600; } td.num { font-variant-numeric: tabular-nums; }
.pill { display: inline-block; padding: 1px 8px; border-radius: 10px; font-size: 12px; font-weight: 600;
        white-space: nowrap; }
.p-pass { background: #2e7d32; color: #fff; } .p-fail { background: #c62828; color: #fff; }
.p-undecided { background: #c98a00; color: #fff; }
.small { color: #5b6670; font-size: 12px; } img { max-width: 100%; display: block; margin: 6px 0; }
pre { background: #f6f7f9; padding: 10px 12px; border-radius: 4px; font-size: 12px; overflow-x: auto; }
.key { display: inline-block; width: 12px; height: 12px; border-radius: 2px; margin-right: 6px;
       vertical-align: -1px; }
.caution { background: #fff8e1; border: 1px solid #ecd48a; padding: 8px 12px; border-radius: 4px;
           font-size: 12px; }
"""

_OUTCOME_CLASS = {PASS: "pass", FAIL: "fail", UNDECIDED: "undecided"}


def _img(png: bytes, alt: str) -> str:
    return f'<img alt="{escape(alt)}" src="data:image/png;base64,{base64.b64encode(png).decode("ascii")}">'


def _pill(outcome: str) -> str:
    return f'<span class="pill p-{_OUTCOME_CLASS[outcome]}">{escape(outcome)}</span>'


def _num(v, fmt: str = "{:.3g}") -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return fmt.format(v)


def _p(v) -> str:
    """'p = 0.123', 'p < 0.001' or 'p -' (not computed)."""
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return "p -"
    return "p < 0.001" if v < 0.001 else f"p = {v:.3f}"


def _table(head: list[str], rows: list[list[str]], num_from: int = 1) -> str:
    out = ["<table><tr>" + "".join(f"<th>{escape(h)}</th>" for h in head) + "</tr>"]
    for r in rows:
        cells = [f"<td{' class=num' if i >= num_from else ''}>{c}</td>" for i, c in enumerate(r)]
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</table>")
    return "".join(out)


def _verdict_section(q: Qualification) -> str:
    rows = []
    for c in q.criteria:
        detail = " ".join(escape(t) for t in (c.note, c.to_settle and f"To settle: {c.to_settle}") if t)
        rows.append(
            [
                escape(c.name),
                escape(c.measured),
                escape(c.required),
                f"{c.confidence:.0%}",
                _pill(c.outcome),
                f'<span class="small">{escape(c.method)}</span>'
                + (f'<br><span class="small">{detail}</span>' if detail else ""),
            ]
        )
    return _table(
        ["criterion", "measured [one-sided bounds]", "required", "confidence", "result", "method and notes"],
        rows,
        num_from=1,
    )


def _metric_table(entry: dict, names: list[str], metric: str) -> str:
    m = METRICS[metric]
    k = m.display_scale
    unit = m.display_unit
    rows = []
    for i, name in enumerate(names):
        s = entry.get(name, {})
        key = f'<span class="key" style="background:{COLOURS[i % len(COLOURS)]}"></span>{escape(name)}'

        def iv(d, scale=k):
            if not d or d.get("estimate") is None:
                return "-"
            f4 = "{:.4g}"
            return (
                f"{_num(d['estimate'] * scale, f4)} [{_num(d['low'] * scale, f4)}, "
                f"{_num(d['high'] * scale, f4)}]"
            )

        sh = s.get("beyond_limit")
        share = (
            "-"
            if not sh
            else (
                f"{sh['beyond']:,} of {sh['total']:,} ({sh['share']:.2%}); CP {sh['cp_low']:.2%} to "
                f"{sh['cp_high']:.2%}; units {_num(sh['unit_low'], '{:.2%}')} to "
                f"{_num(sh['unit_high'], '{:.2%}')}"
            )
        )
        if m.kind == "rate":
            rows.append(
                [
                    key,
                    str(entry["units"][name]),
                    f"{entry['values'][name]:,}",
                    iv(s.get("mean")) + f" {escape(unit)}",
                    "-",
                    "-",
                    "-",
                    share,
                ]
            )
        else:
            rows.append(
                [
                    key,
                    str(entry["units"][name]),
                    f"{entry['values'][name]:,}",
                    iv(s.get("p95")) + f" {escape(unit)}",
                    iv(s.get("p99")) + f" {escape(unit)}",
                    iv(s.get("ppk"), 1.0),
                    iv(s.get("percentile_index"), 1.0),
                    share,
                ]
            )
    head = [
        "population",
        "units",
        "values",
        "p95 [bounds]" if m.kind != "rate" else "mean [bounds]",
        "p99 [bounds]",
        "Ppk",
        "percentile index",
        "beyond the limit",
    ]
    out = _table(head, rows)
    t = entry.get("tests", {})
    if "note" in t:
        out += f'<p class="small">Tests: {escape(t["note"])}</p>'
    elif t:
        cap = " (at the end of scipy's table: the true value lies beyond)" if t.get("anderson_capped") else ""
        out += (
            f'<p class="small">Distribution-free tests on one value per unit ({escape(t["summary"])}; '
            f"units {', '.join(str(u) for u in t['units'])}): Mann-Whitney {_p(t['mann_whitney_p'])} "
            f"(candidate worse, one-sided: {_p(t['mann_whitney_worse_p'])}), Kolmogorov-Smirnov "
            f"{_p(t['ks_p'])}, Anderson-Darling k-sample {_p(t['anderson_p'])}{cap}, "
            f"Kruskal-Wallis {_p(t['kruskal_p'])}.</p>"
        )
    return out


def _trend_series(
    lots: list[LotData], metric: str, percentile: float
) -> list[tuple[str, int, np.ndarray, np.ndarray]]:
    """Per unit: (serial, lot index, window mid cycles, the percentile in each summary window)."""
    out = []
    for i, lot in enumerate(lots):
        for serial, cycles, by_pct in lot.trends.get(metric, []):
            near = min(by_pct, key=lambda p: abs(p - percentile))
            out.append((serial, i, np.asarray(cycles, float), np.asarray(by_pct[near], float)))
    return out


def _life_section(q: Qualification, lots: list[LotData]) -> str:
    req = q.requirements
    x = req.life_percent
    tables = []
    for lot in lots:
        table = lot.population.life
        if table is None:
            continue
        try:
            fit = fit_weibull(table)
        except DataError:
            fit = None
        tables.append((lot.population.name, table, fit))
    parts = []
    if tables:
        parts.append(_img(weibull_png(tables, req.life_cycles, x), "Weibull probability plot"))
        parts.append(
            '<p class="small">Failures at median ranks (Johnson\'s adjusted ranks for the '
            "suspensions, Benard's approximation); ticks along the bottom are suspensions (units "
            "still running or removed). Lines are maximum-likelihood fits with the suspensions in "
            "the likelihood.</p>"
        )
    rows, mode_rows = [], []
    order = [lot.population.name for lot in lots]
    for name, info in sorted(q.life.items(), key=lambda kv: order.index(kv[0]) if kv[0] in order else 99):
        if name == "same_weibull_test" or not isinstance(info, dict) or not info.get("units"):
            continue
        fit = info.get("fit", {})
        rate = info.get("rate_per_10k")
        rate_txt = (
            "-"
            if not rate
            else (
                f"{rate['rate']:.3g} [{rate['low']:.3g}, {rate['high']:.3g}] per 10,000 "
                f"{escape(rate['operation'])}s"
            )
        )
        if "shape" in fit:
            lo, hi = fit["bx_bounds"]
            rows.append(
                [
                    escape(name),
                    str(info["units"]),
                    str(info["failures"]),
                    str(info["suspensions"]),
                    f"{fit['shape']:.3g} [{fit['shape_bounds'][0]:.3g}, {fit['shape_bounds'][1]:.3g}]",
                    f"{fit['scale']:,.0f}",
                    f"{fit['bx']:,.0f} [{_num(lo, '{:,.0f}')}, {_num(hi, '{:,.0f}')}]",
                    rate_txt,
                ]
            )
        else:
            rows.append(
                [
                    escape(name),
                    str(info["units"]),
                    str(info["failures"]),
                    str(info["suspensions"]),
                    "-",
                    "-",
                    escape(fit.get("note", "-")),
                    rate_txt,
                ]
            )
        for mode, mf in info.get("modes", {}).items():
            if "shape" in mf:
                mode_rows.append(
                    [
                        escape(name),
                        escape(mode),
                        str(mf["failures"]),
                        f"{mf['shape']:.3g}",
                        f"{mf['scale']:,.0f}",
                        f"{mf['bx']:,.0f}",
                    ]
                )
            else:
                mode_rows.append(
                    [escape(name), escape(mode), str(mf["failures"]), "-", "-", escape(mf.get("note", ""))]
                )
    parts.append(
        _table(
            [
                "population",
                "units",
                "failed",
                "suspended",
                "shape [bounds]",
                "scale (cycles)",
                f"B{x:g} life [bounds] (cycles)",
                "failure rate (Clopper-Pearson)",
            ],
            rows,
        )
    )
    same = q.life.get("same_weibull_test")
    if same:
        parts.append(
            f'<p class="small">Same Weibull for both populations? Likelihood-ratio test: '
            f"statistic {same['statistic']:.3g} on {same['dof']} degrees of freedom, "
            f"{_p(same['p_value'])}.</p>"
        )
    if mode_rows:
        parts.append("<h3>Failure modes (competing risks)</h3>")
        parts.append(
            '<p class="small">Each mode is fitted on its own with the other modes\' failures '
            "counted as suspensions (a welded unit tells nothing about when it would have worn "
            "out); a mode needs three failures for a fit.</p>"
        )
        parts.append(
            _table(
                ["population", "mode", "failures", "shape", "scale (cycles)", f"B{x:g} (cycles)"],
                mode_rows,
                num_from=2,
            )
        )
    unit_rows = []
    for lot in lots:
        table = lot.population.life
        if table is None:
            continue
        for i in np.argsort(table.cycles, kind="stable"):
            state = f"failed: {table.mode[i]}" if table.failed[i] else "suspended (running or removed)"
            unit_rows.append(
                [
                    escape(lot.population.name),
                    escape(str(table.unit[i])),
                    escape(state),
                    f"{table.cycles[i]:,.0f}",
                ]
            )
    if unit_rows:
        parts.append("<h3>Units</h3>")
        parts.append(_table(["population", "unit", "status", "cycles"], unit_rows, num_from=3))
    return "".join(parts)


def _runs_section(lots: list[LotData]) -> str:
    seen, rows, inc_rows = set(), [], []
    for lot in lots:
        for run in lot.runs:
            if run.id in seen:
                continue
            seen.add(run.id)
            ended = run.ended_at.strftime("%Y-%m-%d %H:%M") if run.ended_at else "-"
            rows.append(
                [
                    str(run.id),
                    escape(run.bench),
                    run.started_at.strftime("%Y-%m-%d %H:%M"),
                    ended,
                    escape(run.state),
                    escape(run.end_reason or "-"),
                    f"{run.cycles_done:,}",
                    f"{run.units} ({run.units_failed} failed)",
                    str(run.incidents),
                    escape(run.software_version or "-"),
                    escape(run.note or ""),
                ]
            )
            for inc in lot.incidents.get(run.id, []):
                inc_rows.append(
                    [
                        str(run.id),
                        escape(inc.kind),
                        f"{inc.t_start_ns / 1e9:,.1f}",
                        f"{inc.duration_s:.1f}",
                        "-" if inc.edges_lost is None else f"{inc.edges_lost:,}",
                        "bench" if inc.channel is None else str(inc.channel),
                        escape(inc.detail),
                    ]
                )
    if not rows:
        return "<p>No runs recorded for these lots.</p>"
    out = _table(
        [
            "run",
            "bench",
            "started",
            "ended",
            "state",
            "how it ended",
            "cycles",
            "units",
            "incidents",
            "software",
            "note",
        ],
        rows,
    )
    out += "<h3>Incidents</h3>"
    out += (
        _table(
            ["run", "kind", "at (s, run time)", "lasting (s)", "edges lost", "channel", "detail"], inc_rows
        )
        if inc_rows
        else "<p>None.</p>"
    )
    return out


def render_report(
    q: Qualification,
    incumbent: LotData,
    candidate: LotData,
    *,
    spec_name: str,
    spec_text: str,
    created: datetime | None = None,
) -> str:
    created = created or datetime.now(UTC)
    lots = [incumbent, candidate]
    names = [incumbent.population.name, candidate.population.name]
    cls = _OUTCOME_CLASS[q.outcome]
    counts = {o: sum(c.outcome == o for c in q.criteria) for o in (PASS, FAIL, UNDECIDED)}
    h = [
        f"<!DOCTYPE html><html lang=en><head><meta charset=utf-8><title>Qualification: "
        f"{escape(candidate.label)} against {escape(incumbent.label)}</title><style>{_CSS}</style></head>"
        "<body><main>"
    ]
    h.append(f"<h1>Qualification: {escape(candidate.label)} against {escape(incumbent.label)}</h1>")
    sup = " ".join(
        f'<span class="key" style="background:{COLOURS[i]}"></span>{escape(lot.label)}'
        f"{' - ' + escape(lot.supplier) if lot.supplier else ''} "
        f"({'incumbent' if i == 0 else 'candidate'}, {lot.population.units} units)"
        for i, lot in enumerate(lots)
    )
    h.append(
        f'<p class="sub">{sup}<br>Spec: {escape(spec_name)}. Every bound is one-sided at '
        f"{q.requirements.confidence:.0%}. Written {created:%Y-%m-%d %H:%M} UTC by benchlog "
        f"{escape(__version__)}.</p>"
    )
    h.append(
        f'<div class="banner b-{cls}">Verdict: {escape(q.outcome)}<small>{counts[PASS]} criteria pass, '
        f"{counts[FAIL]} fail, {counts[UNDECIDED]} not yet decidable. Fail if any criterion fails; "
        "pass only when all pass.</small></div>"
    )
    h.append("<h2>Verdict</h2>")
    h.append(_verdict_section(q))
    h.append(
        '<p class="small">Units, not actuations, are the experimental unit: population percentiles, '
        "rates and capability carry bounds from a bootstrap that resamples whole units; the "
        "distribution-free tests compare one summary value per unit. The Clopper-Pearson interval on "
        "the share beyond a limit treats these units' recorded actuations as independent trials and "
        "is shown for those actuations only.</p>"
    )
    limits = {lim.metric: lim for lim in q.requirements.limits}
    h.append("<h2>Metrics</h2>")
    for metric, entry in q.comparisons.items():
        m = METRICS[metric]
        lim = limits.get(metric)
        if lim is None and metric not in ("make_bounce", "break_bounce", "operate_time", "release_time"):
            continue
        h.append(f"<h3>{escape(m.label.capitalize())}</h3>")
        samples = [
            (n, lot.population.samples[metric])
            for n, lot in zip(names, lots, strict=True)
            if metric in lot.population.samples
        ]
        if m.kind != "rate" and any(len(s) for _, s in samples):
            h.append(
                _img(
                    ecdf_png(metric, samples, lim.value if lim else None, lim.percentile if lim else None),
                    f"{m.label} distributions",
                )
            )
            pct = min(lim.percentile, 99.0) if lim else 95.0
            series = _trend_series(lots, metric, pct)
            if series:
                h.append(
                    _img(
                        trend_png(metric, series, names, lim.value if lim else None, pct),
                        f"{m.label} per unit over life",
                    )
                )
                h.append(
                    f'<p class="small">One line per unit: its p{pct:g} in each window of '
                    f"{SUMMARY_WINDOW:,} life cycles (from the store's distribution summaries).</p>"
                )
        h.append(_metric_table(entry, names, metric))
    h.append("<h2>Life</h2>")
    h.append(_life_section(q, lots))
    h.append("<h2>Runs and incidents</h2>")
    h.append(_runs_section(lots))
    h.append("<h2>Spec used</h2>")
    h.append(f"<p>{escape(spec_name)}</p><pre>{escape(spec_text)}</pre>")
    h.append(
        "<h2>How to read this</h2><ul class=small>"
        "<li>pass: the bound on the unfavourable side already meets the requirement; fail: the bound "
        "on the favourable side already misses it; not yet decidable: the requirement lies inside "
        "the interval, and more units (or cycles, for life) would settle it.</li>"
        "<li>Life: Weibull maximum likelihood with suspensions; bounds from the likelihood ratio "
        "(profile likelihood). With too few failures a Weibayes bound with an assumed shape is "
        "used.</li><li>A limit at percentile 100 applies to every actuation: a unit beyond it fails, "
        "as the spec judges units.</li><li>Ppk = (limit - mean) / 3s; the percentile index is "
        "(limit - median) / (p99.865 - median), the quantile form for skewed bounce data.</li></ul>"
    )
    h.append(
        '<p class="caution">Life tests often switch mains voltage and inductive loads: keep benches '
        "enclosed, isolate the sampler from the load circuit, fit flyback diodes across coils, and have "
        "load wiring done by qualified people. Local electrical codes and licensed practice take "
        "precedence.</p>"
    )
    h.append("</main></body></html>")
    return "\n".join(h)
