"""`benchlog report`: write the self-contained HTML qualification report."""

from __future__ import annotations

import argparse

from benchlog.views.cli.cmd_qualify import EPILOG, add_common

NAME = "report"
HELP = "Write a self-contained HTML qualification report (verdict, plots, life, runs, the spec used)."


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.epilog = EPILOG.replace("Exit status", "Exit status (as for qualify)")
    p.formatter_class = argparse.RawDescriptionHelpFormatter
    add_common(p)
    p.add_argument("-o", "--output", default="qualification.html", help="HTML file to write")


def run(args: argparse.Namespace) -> int:
    from benchlog.views.cli.cmd_qualify import evaluate
    from benchlog.views.report import write_report

    ev = evaluate(args, with_runs=True)
    write_report(args.output, ev)
    q = ev.qualification
    print(f"wrote {args.output}: verdict {q.outcome} (exit {q.exit_code})")
    return q.exit_code
