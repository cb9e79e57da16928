"""`benchlog export`: actuations as CSV, raw edges as VCD, from the database."""

from __future__ import annotations

import argparse

from benchlog.views.cli._args import JSON_HELP, add_output

NAME = "export"
HELP = (
    "Write recorded actuations as CSV, a run's raw edges as a VCD waveform file, or each unit's life "
    "(failure and first spec break, times in UTC) as CSV or JSON."
)


def _span(text: str) -> tuple[float, float]:
    lo, sep, hi = text.partition(":")
    try:
        if not sep:
            raise ValueError
        a, b = float(lo), float(hi)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(f"expected FIRST:LAST, got {text!r}") from exc
    if b < a:
        raise argparse.ArgumentTypeError(f"the span {text!r} ends before it starts")
    return a, b


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "what",
        metavar="FORMAT",
        choices=("csv", "vcd", "units"),
        help="csv: actuations; vcd: raw edges of one run; units: each unit's life, failure and its times",
    )
    p.add_argument("--db", help="database URL or SQLite file (default: $BENCHLOG_DB or ./benchlog.sqlite)")
    p.add_argument("--run", type=int, action="append", help="run id (vcd: required; csv: repeatable)")
    p.add_argument("--unit", type=int, action="append", metavar="ID", help="unit id (repeatable)")
    p.add_argument("--part", action="append", help="part number (csv, repeatable)")
    p.add_argument("--lot", type=int, action="append", metavar="ID", help="lot id (csv, repeatable)")
    p.add_argument("--kind", choices=("make", "break"), help="only makes or only breaks (csv)")
    p.add_argument("--cycles", type=_span, metavar="FIRST:LAST", help="life cycles, inclusive")
    p.add_argument("--seconds", type=_span, metavar="FROM:TO", help="run time span in seconds (vcd)")
    p.add_argument("--json", action="store_true", help=JSON_HELP + " (units: instead of CSV)")
    add_output(p, "write to FILE (default: standard output)")


def run(args: argparse.Namespace) -> int:
    import sys

    from benchlog.errors import UsageError
    from benchlog.store import Store
    from benchlog.views._notes import say_readonly
    from benchlog.views.export import write_actuations_csv, write_units, write_vcd

    if args.what == "csv" and args.seconds is not None:
        raise UsageError("--seconds applies to vcd; use --cycles for csv")
    if args.json and args.what != "units":
        raise UsageError("--json applies to units")
    if args.what == "units" and (args.run or args.kind or args.cycles or args.seconds):
        raise UsageError("units takes --unit, --lot and --part only")
    if args.what == "vcd" and (not args.run or len(args.run) != 1):
        raise UsageError("vcd needs exactly one --run")
    if args.what == "vcd" and args.seconds is not None and args.cycles is not None:
        raise UsageError("give --cycles or --seconds, not both")
    cycles = None if args.cycles is None else (int(args.cycles[0]), int(args.cycles[1]))
    with Store.open(args.db, readonly=True) as store:
        say_readonly(store)
        out = open(args.output, "w", encoding="utf-8", newline="") if args.output else sys.stdout
        try:
            if args.what == "csv":
                n = write_actuations_csv(
                    store,
                    out,
                    units=args.unit,
                    lots=args.lot,
                    parts=args.part,
                    runs=args.run,
                    kind=args.kind,
                    cycles=cycles,
                )
                what = "actuations"
            elif args.what == "units":
                n = write_units(
                    store, out, as_json=args.json, units=args.unit, lots=args.lot, parts=args.part
                )
                what = "units"
            else:
                t_ns = None
                if args.seconds is not None:
                    t_ns = (int(args.seconds[0] * 1e9), int(args.seconds[1] * 1e9))
                n = write_vcd(store, out, args.run[0], units=args.unit, t_ns=t_ns, cycles=cycles)
                what = "edges"
        finally:
            if args.output:
                out.close()
    if args.output:
        print(f"wrote {n:,} {what} to {args.output}", file=sys.stderr)
    return 0
