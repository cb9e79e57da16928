"""`benchlog report`: write the self-contained HTML qualification report."""

from __future__ import annotations

import argparse

from benchlog.views.cli._args import add_output
from benchlog.views.cli.cmd_qualify import add_common

NAME = "report"
HELP = "Write a self-contained HTML qualification report (verdict, plots, life, runs, the spec used)."


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.epilog = (
        "The verdict is the exit status, as for qualify: 0 pass, 1 fail, 2 not yet decidable.\n"
        "An existing FILE is kept unless --force is given."
    )
    add_common(p)
    add_output(p, "the HTML file to write (default: qualification.html)", default="qualification.html")
    p.add_argument("--force", action="store_true", help="replace FILE if it exists")


def run(args: argparse.Namespace) -> int:
    from pathlib import Path

    from benchlog.errors import UsageError
    from benchlog.views.cli.cmd_qualify import evaluate
    from benchlog.views.report import write_report

    if Path(args.output).exists() and not args.force:
        raise UsageError(f"{args.output} exists: give --force to replace it, or -o another file")
    ev = evaluate(args, with_runs=True)
    write_report(args.output, ev)
    q = ev.qualification
    print(f"wrote {args.output}: verdict {q.outcome} (exit {q.exit_code})")
    return q.exit_code
