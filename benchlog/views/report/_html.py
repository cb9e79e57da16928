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
from benchlog.views.report._build import CONDITIONS, ReportInfo
from benchlog.views.report._data import LotData, data_checksum
from benchlog.views.report._plots import COLOURS, Plot, ecdf_png, trend_png, weibull_png

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
th, td { text-align: left; padding: 5px 8px; border-bottom: 1px solid #e3e6ea; vertical-align: top;
         overflow-wrap: break-word; }
th { background: #f0f2f4; font-weight: 600; } td.num { font-variant-numeric: tabular-nums; }
table.ident th { width: 22%; } table.sign td { height: 34px; }
.pill { display: inline-block; padding: 1px 8px; border-radius: 10px; font-size: 12px; font-weight: 600;
        white-space: nowrap; }
.p-pass { background: #2e7d32; color: #fff; } .p-fail { background: #c62828; color: #fff; }
.p-undecided { background: #c98a00; color: #fff; }
.small { color: #5b6670; font-size: 12px; } img { max-width: 100%; display: block; margin: 6px 0; }
pre { background: #f6f7f9; padding: 10px 12px; border-radius: 4px; font-size: 12px;
      white-space: pre-wrap; overflow-wrap: anywhere; }
.key { display: inline-block; width: 12px; height: 12px; border-radius: 2px; margin-right: 6px;
       vertical-align: -1px; }
.caution { background: #fff8e1; border: 1px solid #ecd48a; padding: 8px 12px; border-radius: 4px;
           font-size: 12px; }
.absent { color: #8a5a00; font-style: italic; }
.mono { font-family: ui-monospace, "DejaVu Sans Mono", monospace; font-size: 12px; overflow-wrap: anywhere; }
h1, h2, h3 { break-after: avoid; page-break-after: avoid; }
.keep, img, tr, .banner, .caution { break-inside: avoid; page-break-inside: avoid; }
@page { margin: 16mm 13mm 15mm;
        @top-left { font: 8pt sans-serif; color: #5b6670; }
        @bottom-right { content: "page " counter(page) " of " counter(pages); font: 8pt sans-serif;
                        color: #5b6670; } }
@media print {
  body { background: #fff; font-size: 9.5pt; line-height: 1.35; }
  main { max-width: none; margin: 0; padding: 0; }
  h1 { font-size: 17pt; } h2 { font-size: 13pt; margin: 14pt 0 5pt; }
  h3 { font-size: 11pt; margin: 10pt 0 4pt; }
  table { font-size: 8pt; margin: 4pt 0 8pt; } th, td { padding: 2pt 4pt; }
  .small, pre, .caution, .mono { font-size: 7.5pt; } .pill { font-size: 7.5pt; padding: 0 5pt; }
  .banner { font-size: 12pt; padding: 8pt 12pt; } .banner small { font-size: 9pt; }
  img { width: 100%; height: auto; margin: 3pt 0; }
  * { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
}
"""

_OUTCOME_CLASS = {PASS: "pass", FAIL: "fail", UNDECIDED: "undecided"}


def _img(plot: Plot, alt: str) -> str:
    """The figure, with its x range and the requirement it draws as data attributes (a reader's tool
    or a test can check that the requirement is inside the axes)."""
    lo, hi = plot.x_range
    req = "" if plot.requirement is None else f' data-requirement="{plot.requirement:.6g}"'
    data = base64.b64encode(plot.png).decode("ascii")
    return (
        f'<img alt="{escape(alt)}" data-x-range="{lo:.6g} {hi:.6g}"{req} src="data:image/png;base64,{data}">'
    )


def _captures_section(captures: list) -> str:
    """Analog captures given with the report: per file its actuations by the voltage definitions and
    the figure of one of them."""
    out = [
        "<h2>Analog captures</h2>",
        '<p class="small">Oscilloscope or ADC captures given with this report, measured by the voltage '
        "definitions (edges where the voltage across the contact crosses two thresholds, each state held "
        "a minimum time), as <span class=mono>benchlog scope</span> measures them. Each figure shows one "
        "actuation: the voltage, both thresholds, the derived edges and the bounce.</p>",
    ]
    for c in captures:
        rows = [
            [
                escape(r["kind"]),
                _num(r["t_first_ms"], "{:.3f}"),
                _num(r["bounce_us"], "{:.1f}"),
                str(r["bounce_count"]),
                str(r["chatter"]),
                escape(", ".join(r["flags"]) or "-"),
            ]
            for r in c.rows
        ]
        table = _table(["actuation", "first ms", "bounce us", "bounces", "chatter", "flags"], rows)
        head = f"<h3>{escape(c.name)}</h3><p class=small>Edges by {escape(c.rule)}.</p>"
        out.append(_keep(head, _img(c.plot, f"capture {c.name}")))
        out.append(table)
    return "".join(out)


def _keep(*blocks: str) -> str:
    """Blocks printed on one page (a heading with its figure, a figure with its caption)."""
    return '<div class="keep">' + "".join(blocks) + "</div>"


def _count(n: int, one: str, many: str | None = None) -> str:
    return f"{n} {one}" if n == 1 else f"{n} {many or one + 's'}"


def _plural(word: str) -> str:
    """'plunger stroke' -> 'plunger strokes'; 'make or break' -> 'makes and breaks'."""
    if word == "make or break":
        return "makes and breaks"
    return word + ("es" if word.endswith(("s", "x", "ch", "sh")) else "s")


def _tally(passed: int, failed: int, undecided: int) -> str:
    """'5 criteria pass, 1 criterion fails, 2 are not yet decidable' in plain English."""

    def one(n: int, verb_one: str, verb_many: str) -> str:
        return f"1 criterion {verb_one}" if n == 1 else f"{n or 'no'} criteria {verb_many}"

    return ", ".join(
        [
            one(passed, "passes", "pass"),
            one(failed, "fails", "fail"),
            one(undecided, "is not yet decidable", "are not yet decidable"),
        ]
    )


def _css_string(text: str) -> str:
    """A CSS string literal that cannot end the string, the rule or the style element."""
    out = []
    for ch in text:
        if ch.isalnum() or ch in " .,:;-_()/+#=":
            out.append(ch)
        else:
            out.append(f"\\{ord(ch):x} ")
    return '"' + "".join(out) + '"'


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


def _leaning(tests: dict) -> str:
    """The one-sided Mann-Whitney test in the direction the units lean: never "candidate worse, p = 1"
    for a candidate that is better."""
    worse, better = tests.get("mann_whitney_worse_p"), tests.get("mann_whitney_better_p")
    if worse is None or better is None or math.isnan(worse) or math.isnan(better):
        return f"candidate worse, one-sided: {_p(worse)}"
    if better < worse:
        return f"candidate better, one-sided: {_p(better)}"
    return f"candidate worse, one-sided: {_p(worse)}"


def _table(head: list[str], rows: list[list[str]], num_from: int = 1) -> str:
    """A table; its head (when it has one) is repeated on every printed page the table runs onto."""
    out = ["<table>"]
    if any(head):
        out.append("<thead><tr>" + "".join(f"<th>{escape(h)}</th>" for h in head) + "</tr></thead>")
    out.append("<tbody>")
    for r in rows:
        cells = [f"<td{' class=num' if i >= num_from else ''}>{c}</td>" for i, c in enumerate(r)]
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</tbody></table>")
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
            return f"{_num(d['estimate'] * scale)} [{_num(d['low'] * scale)}, {_num(d['high'] * scale)}]"

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
        cap = (
            " (at the end of the tabulated range: the p-value is interpolated in Scholz and Stephens' "
            "critical values, J. Am. Stat. Assoc. 82(399), 1987, which span 0.001 to 0.25; the true "
            "value lies beyond)"
            if t.get("anderson_capped")
            else ""
        )
        out += (
            f'<p class="small">Distribution-free tests on one value per unit ({escape(t["summary"])}; '
            f"units {', '.join(str(u) for u in t['units'])}): Mann-Whitney {_p(t['mann_whitney_p'])} "
            f"({_leaning(t)}), Kolmogorov-Smirnov "
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


def _life_section(q: Qualification, lots: list[LotData], head: str) -> str:
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
        parts.append(
            _keep(
                head,
                _img(weibull_png(tables, req.life_cycles, x), "Weibull probability plot"),
                '<p class="small">Failures at median ranks (Johnson\'s adjusted ranks for the '
                "suspensions, Benard's approximation); ticks along the bottom are suspensions (units "
                "still running or removed), one row per population, with the number of units beside a "
                "tick where several stopped at the same cycles. Lines are maximum-likelihood fits with "
                "the suspensions in the likelihood; the dashed line is the required life.</p>",
            )
        )
    else:
        parts.append(head)
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
                f"{escape(_plural(rate['operation']))}"
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
        parts.append(
            "<h3>Failure modes (competing risks)</h3>"
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
        parts.append(
            "<h3>Units</h3>" + _table(["population", "unit", "status", "cycles"], unit_rows, num_from=3)
        )
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


def _profile_text(profile: dict, target: int) -> str:
    on, off = profile.get("on_ms"), profile.get("off_ms")
    parts = []
    if on is not None and off is not None:
        parts.append(f"drive on {on:g} ms, off {off:g} ms")
    parts += [
        f"{escape(str(k))} {escape(str(v))}" for k, v in profile.items() if k not in ("on_ms", "off_ms")
    ]
    if target:
        parts.append(f"to {target:,} cycles")
    return ", ".join(parts) or "-"


def _conditions_rows(info: ReportInfo, spec, lots: list[LotData]) -> list[list[str]]:
    from_spec = getattr(spec, "extra", {}).get("conditions", {}) if spec is not None else {}
    runs = {run.id: run for lot in lots for run in lot.runs}
    rows = []
    for key, label in CONDITIONS:
        if info.conditions.get(key):
            value, source = escape(info.conditions[key]), "given for this report"
        elif from_spec.get(key):
            value, source = escape(from_spec[key]), "the spec"
        elif key == "profile" and runs:
            texts = sorted({_profile_text(r.profile, r.target_cycles) for r in runs.values()})
            value, source = "; ".join(texts), "recorded with the runs"
        else:
            value, source = '<span class="absent">not recorded</span>', "-"
        rows.append([escape(label), value, escape(source)])
    return rows


def _benches_section(lots: list[LotData]) -> str:
    runs = {run.id: run for lot in lots for run in lot.runs}
    benches = {bid: b for lot in lots for bid, b in lot.benches.items()}
    if not runs:
        return "<p>No runs recorded for these lots.</p>"
    rows = []
    for bid in sorted({r.bench_id for r in runs.values()}):
        b = benches.get(bid)
        its = [r for r in runs.values() if r.bench_id == bid]
        boards = sorted({r.board_id or (b.board_id if b else None) or "not recorded" for r in its})
        protocols = sorted({str(r.protocol_version) for r in its if r.protocol_version is not None})
        software = sorted({r.software_version for r in its if r.software_version})
        rows.append(
            [
                escape(its[0].bench),
                ", ".join(escape(x) for x in boards),
                ", ".join(protocols) or '<span class="absent">not recorded</span>',
                "-" if not b or not b.clock_hz else f"{b.clock_hz:,} Hz",
                "-" if not b or not b.counter_bits else f"{b.counter_bits} bits",
                "-" if not b or b.channels is None else str(b.channels),
                ", ".join(str(r.id) for r in sorted(its, key=lambda r: r.id)),
                ", ".join(escape(x) for x in software) or "-",
            ]
        )
    return _table(
        [
            "bench",
            "sampler board (as announced)",
            "sampler protocol version",
            "sampler clock",
            "counter",
            "channels",
            "runs",
            "benchlog version recording",
        ],
        rows,
    )


def _data_rows(lots: list[LotData], store: str, checksum: str) -> list[list[str]]:
    runs = sorted({run.id for lot in lots for run in lot.runs})
    values = sum(lot.measured for lot in lots)
    units = sum(len(lot.serial_of) for lot in lots)
    return [
        ["store", f'<span class="mono">{escape(store or "-")}</span>'],
        ["runs", ", ".join(str(r) for r in runs) or "none"],
        ["lots", "; ".join(escape(lot.label) for lot in lots)],
        [
            "drawn",
            f"{_count(units, 'unit')}, {_count(values, 'measured actuation')} (incomplete ones left out)",
        ],
        [
            "SHA-256 of the data",
            f'<span class="mono">{checksum}</span><br><span class="small">over every unit\'s distribution '
            "summaries (by serial: histogram bins, exact counts, sums and sums of squares) and the life "
            "table, as read from the store; the same data gives the same sum in any store</span>",
        ],
    ]


def _sign_off(info: ReportInfo) -> str:
    rows = [
        [escape(s.role), escape(s.name) if s.name else "", "", escape(s.date) if s.date else ""]
        for s in info.sign_off
    ]
    return _table(["", "name", "signature", "date"], rows, num_from=9).replace(
        "<table>", '<table class="sign">', 1
    )


def _page_style(info: ReportInfo, running: str) -> str:
    size = {"a4": "size: A4;", "letter": "size: letter;"}.get(info.paper, "")
    return f"<style>@page {{ {size} @top-left {{ content: {_css_string(running)}; }} }}</style>"


def render_report(
    q: Qualification,
    incumbent: LotData,
    candidate: LotData,
    *,
    spec_name: str,
    spec_text: str,
    created: datetime | None = None,
    spec=None,
    store: str = "",
    info: ReportInfo | None = None,
    captures: list | None = None,
) -> str:
    info = info or ReportInfo()
    created = created or datetime.now(UTC)
    lots = [incumbent, candidate]
    names = [incumbent.population.name, candidate.population.name]
    cls = _OUTCOME_CLASS[q.outcome]
    checksum = data_checksum(lots)
    title = f"Qualification: {candidate.label} against {incumbent.label}"
    number = info.number or "not numbered"
    revision = info.revision or "-"
    running = f"{title} | report {number}, revision {revision} | data {checksum[:12]}"
    h = [
        f"<!DOCTYPE html><html lang=en><head><meta charset=utf-8><title>{escape(title)}</title>"
        f"<style>{_CSS}</style>{_page_style(info, running)}</head><body><main>"
    ]
    h.append(f"<h1>{escape(title)}</h1>")
    sup = " ".join(
        f'<span class="key" style="background:{COLOURS[i]}"></span>{escape(lot.label)}'
        f"{' - ' + escape(lot.supplier) if lot.supplier else ''} "
        f"({'incumbent' if i == 0 else 'candidate'}, {_count(lot.population.units, 'unit')})"
        for i, lot in enumerate(lots)
    )
    h.append(
        f'<p class="sub">{sup}<br>Spec: {escape(spec_name)}. Every bound is one-sided at '
        f"{q.requirements.confidence:.0%}.</p>"
    )
    absent = '<span class="absent">not assigned</span>'
    h.append(
        _table(
            ["report", ""],
            [
                ["report number", escape(info.number) if info.number else absent],
                ["revision", escape(info.revision) if info.revision else absent],
                ["written", f"{created:%Y-%m-%d %H:%M} UTC by benchlog {escape(__version__)}"],
                ["data checksum", f'<span class="mono">SHA-256 {checksum[:16]}...</span> (in full below)'],
            ],
            num_from=9,
        ).replace("<table>", '<table class="ident">', 1)
    )
    by = {o: [c.name for c in q.criteria if c.outcome == o] for o in (PASS, FAIL, UNDECIDED)}
    named = ""
    if by[FAIL]:
        named += "<br>Failed: " + "; ".join(escape(n) for n in by[FAIL]) + "."
    if by[UNDECIDED]:
        named += "<br>Not yet decidable: " + "; ".join(escape(n) for n in by[UNDECIDED]) + "."
    h.append(
        f'<div class="banner b-{cls}">Verdict: {escape(q.outcome)}<small>'
        f"{_tally(len(by[PASS]), len(by[FAIL]), len(by[UNDECIDED]))}.{named}<br>"
        "Fail if any criterion fails; pass only when all pass.</small></div>"
    )
    h.append("<h2>Verdict</h2>" + _verdict_section(q))  # a long table: rows kept whole, not the table
    h.append(
        '<p class="small">Units, not actuations, are the experimental unit: population percentiles, '
        "capability and the share beyond a limit carry bounds from a model with a random unit effect "
        "(generalized pivotal draws), rates from a bootstrap that resamples whole units; the "
        "distribution-free tests compare one summary value per unit. The Clopper-Pearson bounds on "
        "the share beyond a limit treat these units' recorded actuations as independent trials and "
        "are shown for those actuations only. Every bound is one-sided at the stated confidence. "
        "Metric values are given to three significant figures throughout, cycles in whole cycles.</p>"
    )
    h.append(
        _keep(
            "<h2>Test conditions</h2>",
            _table(["condition", "value", "from"], _conditions_rows(info, spec, lots)),
        )
    )
    h.append(_keep("<h2>Benches and samplers</h2>", _benches_section(lots)))
    h.append(_keep("<h2>Data</h2>", _table(["", ""], _data_rows(lots, store, checksum), num_from=9)))
    limits = {lim.metric: lim for lim in q.requirements.limits}
    h.append("<h2>Metrics</h2>")
    for metric, entry in q.comparisons.items():
        m = METRICS[metric]
        lim = limits.get(metric)
        if lim is None and metric not in ("make_bounce", "break_bounce", "operate_time", "release_time"):
            continue
        head = f"<h3>{escape(m.label.capitalize())}</h3>"
        samples = [
            (n, lot.population.samples[metric])
            for n, lot in zip(names, lots, strict=True)
            if metric in lot.population.samples
        ]
        if m.kind != "rate" and any(len(s) for _, s in samples):
            h.append(
                _keep(
                    head,
                    _img(
                        ecdf_png(
                            metric, samples, lim.value if lim else None, lim.percentile if lim else None
                        ),
                        f"{m.label} distributions",
                    ),
                )
            )
            pct = min(lim.percentile, 99.0) if lim else 95.0
            series = _trend_series(lots, metric, pct)
            if series:
                h.append(
                    _keep(
                        _img(
                            trend_png(metric, series, names, lim.value if lim else None, pct),
                            f"{m.label} per unit over life",
                        ),
                        f'<p class="small">One line per unit: its p{pct:g} in each window of '
                        f"{SUMMARY_WINDOW:,} life cycles (from the store's distribution summaries).</p>",
                    )
                )
            h.append(_metric_table(entry, names, metric))
        else:
            h.append(_keep(head, _metric_table(entry, names, metric)))
    h.append(_life_section(q, lots, "<h2>Life</h2>"))
    h.append("<h2>Runs and incidents</h2>")
    h.append(_runs_section(lots))
    if captures:
        h.append(_captures_section(captures))
    h.append(_keep("<h2>Spec used</h2>", f"<p>{escape(spec_name)}</p>"))
    h.append(f"<pre>{escape(spec_text)}</pre>")
    h.append(
        "<h2>How to read this</h2><ul class=small>"
        "<li>pass: the bound on the unfavourable side already meets the requirement; fail: the bound "
        "on the favourable side already misses it; not yet decidable: the requirement lies inside "
        "the interval, and more units (or cycles, for life) would settle it.</li>"
        "<li>Life: Weibull maximum likelihood with suspensions; bounds from the likelihood ratio "
        "(profile likelihood); the Bx life's lower bound from the posterior under the prior 1/b "
        "on log life's scale, which matches confidence exactly for complete data. "
        "With too few failures a Weibayes bound with an assumed shape is used.</li>"
        "<li>A limit at percentile 100 applies to every actuation: a unit beyond it fails, "
        "as the spec judges units.</li><li>Ppk = (limit - mean) / 3s; the percentile index is "
        "(limit - median) / (p99.865 - median), the quantile form for skewed bounce data.</li></ul>"
    )
    h.append(
        '<p class="caution">Life tests often switch mains voltage and inductive loads: keep benches '
        "enclosed, isolate the sampler from the load circuit, fit flyback diodes across coils, and have "
        "load wiring done by qualified people. Local electrical codes and licensed practice take "
        "precedence.</p>"
    )
    h.append(_keep("<h2>Sign-off</h2>", _sign_off(info)))
    h.append("</main></body></html>")
    return "\n".join(h)
