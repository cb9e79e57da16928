"""`benchlog scope`: measure oscilloscope and ADC captures by the voltage definitions (docs/analog.md)."""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

from benchlog.views.cli._args import JSON_HELP, add_output, non_negative, number_within, positive

tolerance = number_within(0, 1, low_inclusive=True)

NAME = "scope"
HELP = "Measure analog captures (CSV, .npz, WAV) by the voltage definitions; compare a sampler; design RC."


def _percent(text: str) -> float:
    try:
        v = float(text.rstrip("%"))
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a percentage: {text!r}") from None
    if not 0 < v < 100:
        raise argparse.ArgumentTypeError(f"must be between 0 and 100: {text!r}")
    return v / 100.0


def _levels(text: str) -> tuple[float, float]:
    try:
        hi, lo = (float(x) for x in text.split(":"))
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected OPEN:CLOSED volts, e.g. 3.5:1.5, got {text!r}") from None
    if not (math.isfinite(hi) and math.isfinite(lo) and hi > lo):
        raise argparse.ArgumentTypeError(f"the open level must be above the closed level: {text!r}")
    return hi, lo


def _ohms(text: str) -> float:
    t = text.strip().lower().removesuffix("ohm").strip()
    mult = {"k": 1e3, "m": 1e6}.get(t[-1:], 1.0)
    try:
        v = float(t[:-1] if mult != 1.0 else t) * mult
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a resistance: {text!r} (e.g. 4700, 4.7k, 1M)") from None
    if not (v > 0 and math.isfinite(v)):
        raise argparse.ArgumentTypeError(f"a resistance must be positive: {text!r}")
    return v


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("files", nargs="*", metavar="FILE", help="captures: CSV (any delimiter), .npz or WAV")
    p.add_argument(
        "--make-demo", metavar="DIR", help="write the demo captures (simulated, not measured) to DIR"
    )
    src = p.add_argument_group("reading")
    src.add_argument("--channel", help="the contact channel, by name or number (default: the first)")
    src.add_argument("--drive-channel", metavar="NAME", help="a coil or drive channel: gives operate/release")
    src.add_argument(
        "--interval", type=positive, metavar="S", help="sample interval in s, when the file has none"
    )
    src.add_argument("--time-column", metavar="NAME", help="the time column by name or number, or 'none'")
    src.add_argument(
        "--full-scale", type=positive, default=1.0, metavar="V", help="WAV full scale in volts (1)"
    )
    lv = p.add_argument_group(
        "edges by definition (default: 90 %% / 10 %% of the open-circuit voltage, 10 us)"
    )
    lv.add_argument("--open-v", type=positive, metavar="V", help="open-circuit voltage (default: measured)")
    lv.add_argument(
        "--open-pct", type=_percent, default=0.9, metavar="PERCENT", help="open above this %% (90)"
    )
    lv.add_argument(
        "--closed-pct", type=_percent, default=0.1, metavar="PERCENT", help="closed below this %% (10)"
    )
    lv.add_argument("--levels", type=_levels, metavar="OPEN:CLOSED", help="thresholds in volts instead")
    lv.add_argument(
        "--min-us", type=non_negative, default=10.0, help="a state counts once held this long (10)"
    )
    lv.add_argument("--closed-high", action="store_true", help="the trace is high when the contact is closed")
    an = p.add_argument_group("analysis")
    an.add_argument("--spec", help="a part spec (file, or a shipped part number such as AG-MS5)")
    an.add_argument("--settle-ms", type=positive, help="settle window (default: the spec's, else 5)")
    an.add_argument(
        "--chatter-us", type=positive, help="chatter threshold (default: the spec's, else --min-us)"
    )
    dg = p.add_argument_group("sampler comparison and RC design")
    dg.add_argument("--input", metavar="NAME", help="a row of the threshold table (see benchlog debounce)")
    dg.add_argument("--thresholds", metavar="FILE", help="your own threshold table")
    dg.add_argument("--supply", type=positive, metavar="V", help="the input's supply (default: the row's)")
    dg.add_argument("--compare", action="store_true", help="show what a sampler with --input would record")
    dg.add_argument("--sample-us", type=positive, default=1.0, help="the sampler's sample interval (1 us)")
    dg.add_argument("--design", action="store_true", help="choose R and C in front of --input from the trace")
    dg.add_argument("--series", type=_ohms, default=10_000.0, metavar="OHMS", help="series R (10k)")
    dg.add_argument("--preferred", choices=("E12", "E24"), default="E12", help="preferred values for C")
    dg.add_argument(
        "--series-tol", type=tolerance, default=0.05, metavar="FRACTION", help="R tolerance (0.05)"
    )
    dg.add_argument("--cap-tol", type=tolerance, default=0.10, metavar="FRACTION", help="C tolerance (0.10)")
    dg.add_argument(
        "--supply-tol", type=tolerance, default=0.05, metavar="FRACTION", help="supply tol. (0.05)"
    )
    dg.add_argument("--margin", type=non_negative, default=0.2, metavar="V", help="threshold margin (0.2 V)")
    out = p.add_argument_group("output")
    out.add_argument("--plot", action="store_true", help="a text chart of each capture in the terminal")
    out.add_argument("--actuation", type=int, metavar="N", help="chart actuation N (from 1)")
    add_output(out, "write the chart as PNG to FILE (with several captures, FILE is a folder)")
    out.add_argument("--json", action="store_true", help=JSON_HELP)


def run(args) -> int:
    from benchlog.errors import UsageError

    if args.make_demo:
        from benchlog.analog import make_demo

        files = make_demo(args.make_demo)
        for f in files:
            print(f)
        print("Simulated captures (invented demo scenario), not measurements. Try:")
        print(f"  benchlog scope {Path(args.make_demo) / 'AG-MS5_make.csv'} --plot")
        return 0
    if not args.files:
        raise UsageError("give one or more capture files, or --make-demo DIR")
    if (args.compare or args.design) and not args.input:
        raise UsageError("--compare and --design need --input NAME (a row of the threshold table)")
    if args.closed_pct >= args.open_pct:
        raise UsageError("--closed-pct must be below --open-pct")
    if args.actuation is not None and args.actuation < 1:
        raise UsageError("--actuation counts from 1")
    if args.output and len(args.files) > 1 and Path(args.output).suffix.lower() == ".png":
        raise UsageError("with several files, -o/--output is a folder")

    from benchlog.analog import ScopeOptions, plot_capture, scope_capture, text_chart

    opts = ScopeOptions(
        channel=args.channel,
        drive_channel=args.drive_channel,
        interval_s=args.interval,
        time_column=None if (args.time_column or "").lower() == "none" else (args.time_column or "auto"),
        full_scale_v=args.full_scale,
        open_v=args.open_v,
        open_fraction=args.open_pct,
        closed_fraction=args.closed_pct,
        levels=args.levels,
        min_us=args.min_us,
        closed_high=args.closed_high,
        spec=args.spec,
        settle_ms=args.settle_ms,
        chatter_us=args.chatter_us,
        input_name=args.input,
        thresholds=args.thresholds,
        supply=args.supply,
        compare=args.compare,
        sample_us=args.sample_us,
        design=args.design,
        series_ohms=args.series,
        preferred=args.preferred,
        series_tol=args.series_tol,
        cap_tol=args.cap_tol,
        supply_tol=args.supply_tol,
        margin_v=args.margin,
        actuation=args.actuation,
    )
    results = [scope_capture(f, opts) for f in args.files]
    if args.json:
        print(json.dumps({"captures": [r.document for r in results]}, indent=2))
    else:
        for r in results:
            print("\n".join(_text(r.document)))
            if args.plot:
                print(text_chart(r.chart, colour=sys.stdout.isatty()))
    if args.output:
        target = Path(args.output)
        for f, r in zip(args.files, results, strict=True):
            one = len(results) == 1 and target.suffix.lower() == ".png"
            path = target if one else target / f"{Path(f).stem}.png"
            path.parent.mkdir(parents=True, exist_ok=True)
            path.write_bytes(plot_capture(r.chart))
            if not args.json:
                print(f"chart written to {path}")
    return 0


def _num(x, fmt: str = ".1f") -> str:
    return "-" if x is None else format(x, fmt)


def _text(doc: dict) -> list[str]:
    from benchlog.design import format_si

    dt = doc["sample_interval_s"]
    lv = doc["levels"]
    out = [
        f"{doc['file']}: channel {doc['contact_channel']} of {', '.join(doc['channels'])}; "
        f"{doc['samples']} samples every {format_si(dt, 's')} ({format_si(1 / dt, 'S/s')}"
        f"{'' if doc['even_samples'] else ', uneven'}), "
        f"{doc['start_s'] * 1e3:.3f} to {doc['end_s'] * 1e3:.3f} ms",
        f"  edges by definition: {lv['rule']} ({lv['source']}); {doc['edges']} edges",
        "  (times: ms on the capture's own axis; bounce and gaps in us)",
    ]
    rows = doc["actuations"]
    if not rows:
        out.append("  no actuation found (the contact never crossed both thresholds)")
    else:
        out.append("     #  kind   first ms  bounce us  count  longest gap us  chatter  transit us  verdict")
        for i, r in enumerate(rows, 1):
            flags = f"  ({', '.join(r['flags'])})" if r["flags"] else ""
            out.append(
                f"  {i:4d}  {r['kind']:<5} {_num(r['t_first_ms'], '10.3f'):>10}"
                f" {_num(r['bounce_us'], '10.1f'):>10}"
                f" {r['bounce_count']:6d} {_num(r['longest_gap_us'], '15.1f'):>15} {r['chatter']:8d}"
                f" {_num(r['transit_us'], '11.1f'):>11}  {r['verdict']}{flags}"
            )
        for s in doc["summary"]:
            if "verdict" in s:
                out.append(f"  verdict against the spec: {s['verdict']} ({s['reason']})")
    sam = doc["sampler"]
    if sam:
        out.append(
            f"  sampler view: {sam['input']} (VT+ {sam['vt_plus_v']:.3g} V, VT- {sam['vt_minus_v']:.3g} V at "
            f"{sam['supply_v']:g} V), read every {sam['sample_us']:g} us; truth | sampler | difference"
        )
        for i, p in enumerate(sam["pairs"], 1):
            b, c, ch = p["bounce_us"], p["bounce_count"], p["chatter"]
            diff = "-" if b[1] is None or b[0] is None else f"{b[1] - b[0]:+.1f}"
            cdiff = "-" if c[1] is None else f"{c[1] - c[0]:+d}"
            out.append(
                f"  {i:4d}  {p['kind']:<5} bounce us {_num(b[0])} | {_num(b[1])} | {diff}   count {c[0]} | "
                f"{'-' if c[1] is None else c[1]} | {cdiff}   "
                f"chatter {ch[0]} | {'-' if ch[1] is None else ch[1]}"
            )
        sm = sam["summary"]
        d = sm["bounce_us_difference"]
        out.append(
            f"  sampler: {sm['matched']} of {sm['actuations']} actuations matched, "
            f"{sm['missing_in_sampler']} missing, {sm['extra_in_sampler']} extra; bounce difference mean "
            f"{_num(d['mean'], '+.1f')} us (min {_num(d['min'], '+.1f')}, max {_num(d['max'], '+.1f')}); "
            f"bounce count {sm['bounce_count'][0]} "
            f"-> {sm['bounce_count'][1]}; chatter {sm['chatter'][0]} -> {sm['chatter'][1]}"
        )
    rc = doc["rc"]
    if rc:
        head = (
            f"  RC in front of {rc['input']} at {rc['supply_v']:g} V, "
            f"series {format_si(rc['series_ohms'], 'ohm')}, "
            f"{rc['corners']} tolerance corners, {rc['actuations_judged']} actuations from the waveform:"
        )
        out.append(head)
        ch = rc["chosen"]
        if ch:
            out.append(
                f"    recommended C = {format_si(ch['cap_farads'], 'F')} (tau {ch['tau_ms']:.3g} ms): "
                f"no bounce through at any corner, margin {ch['margin_v']:.2f} V, worst delay press "
                f"{_num(ch['delay_make_us'], '.0f')} us, release {_num(ch['delay_break_us'], '.0f')} us"
            )
        else:
            out.append(
                "    no preferred C up to 100 uF both rejects the bounce and follows the contact in time"
            )
        out.append("    C          false  missed  margin V  delay press us  delay release us")
        for s in rc["table"]:
            out.append(
                f"    {format_si(s['cap_farads'], 'F'):<10} {s['false_transitions']:5d} {s['missed']:7d} "
                f"{_num(s['margin_v'], '9.2f'):>9} {_num(s['delay_make_us'], '15.0f'):>15} "
                f"{_num(s['delay_break_us'], '17.0f'):>17}{'  <- chosen' if ch and s == ch else ''}"
            )
    return out
