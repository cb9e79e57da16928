"""`benchlog report`: write the self-contained HTML (or PDF) qualification report."""

from __future__ import annotations

import argparse

from benchlog.views.cli._args import add_output, add_profile
from benchlog.views.cli.cmd_qualify import add_common

NAME = "report"
HELP = "Write a self-contained HTML or PDF qualification report (verdict, plots, life, runs, the spec used)."


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.epilog = (
        "The verdict is the exit status, as for qualify: 0 pass, 1 fail, 2 not yet decidable.\n"
        "An existing FILE is kept unless --force is given."
    )
    add_common(p)
    add_output(
        p,
        "the HTML or PDF file to write (default: qualification.html; with --pdf, qualification.pdf)",
        default="qualification.html",
    )
    p.add_argument("--force", action="store_true", help="replace FILE if it exists")
    p.add_argument(
        "--captures",
        nargs="+",
        metavar="PATH",
        help="analog captures (CSV, .npz, WAV, or a folder of them) to show, measured by the voltage "
        "definitions as benchlog scope does",
    )
    add_quality_file(p)


def _iso_date(text: str) -> str:
    from datetime import date

    try:
        return date.fromisoformat(text).isoformat()
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a date as YYYY-MM-DD, got {text!r}") from None


def add_quality_file(p: argparse.ArgumentParser) -> None:
    """The report's identity, test conditions, sign-off and PDF output."""
    g = p.add_argument_group("quality file")
    g.add_argument("--pdf", action="store_true", help="write PDF (also chosen by an output ending in .pdf)")
    g.add_argument(
        "--paper",
        choices=("a4", "letter"),
        help="page size for print and PDF (default: the printer's; PDF: a4)",
    )
    g.add_argument("--number", metavar="TEXT", help="report number, as the quality system assigns it")
    g.add_argument("--revision", metavar="TEXT", help="report revision")
    add_profile(
        g,
        "the cycle profile the test ran, stated in the report (default: the spec's [conditions], else "
        "the runs' recorded profile)",
    )
    for key, label in (
        ("load", "load switched"),
        ("coil-voltage", "coil voltage"),
        ("ambient", "ambient temperature"),
    ):
        g.add_argument(f"--{key}", metavar="TEXT", help=f"{label} (default: the spec's [conditions])")
    for role in ("prepared", "reviewed", "approved"):
        g.add_argument(f"--{role}", metavar="NAME", help=f"{role} by (default: a blank line to sign on)")
        g.add_argument(f"--{role}-on", metavar="YYYY-MM-DD", type=_iso_date, help="its date (default: blank)")


def profile_words(profile) -> str:
    """`--profile ON_MS:OFF_MS:CYCLES` as the report states a run's recorded profile."""
    until = f"to {profile.cycles:,} cycles" if profile.cycles else "until stopped"
    return f"drive on {profile.on_ms:g} ms, off {profile.off_ms:g} ms, {until}"


def report_info(args: argparse.Namespace):
    from benchlog.views.report import ReportInfo, SignOff

    keys = ("load", "coil_voltage", "ambient")
    conditions = {k: getattr(args, k) for k in keys if getattr(args, k)}
    if args.profile is not None:
        conditions["profile"] = profile_words(args.profile)
    return ReportInfo(
        number=args.number or "",
        revision=args.revision or "",
        conditions=conditions,
        sign_off=tuple(
            SignOff(role, getattr(args, role) or "", getattr(args, f"{role}_on") or "")
            for role in ("prepared", "reviewed", "approved")
        ),
        paper=args.paper or "",
    )


def run(args: argparse.Namespace) -> int:
    from pathlib import Path

    from benchlog.errors import UsageError
    from benchlog.views.cli.cmd_qualify import evaluate
    from benchlog.views.report import write_report

    if args.pdf and args.output == "qualification.html":
        args.output = "qualification.pdf"
    if Path(args.output).exists() and not args.force:
        raise UsageError(f"{args.output} exists: give --force to replace it, or -o another file")
    ev = evaluate(args, with_runs=True)
    captures = None
    if args.captures:
        from benchlog.views.report._captures import capture_figures

        captures = capture_figures(args.captures)
    write_report(args.output, ev, report_info(args), pdf=args.pdf, captures=captures)
    q = ev.qualification
    print(f"wrote {args.output}: verdict {q.outcome} (exit {q.exit_code})")
    return q.exit_code
