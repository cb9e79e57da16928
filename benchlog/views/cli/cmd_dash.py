"""`benchlog dash`: the terminal dashboard over a store (read-only; works on a live recording)."""

from __future__ import annotations

import argparse

NAME = "dash"
HELP = "Open the terminal dashboard on a database (read-only; a live recording or an old file)."


def _seconds(text: str) -> float:
    value = float(text)
    if not 0.1 <= value <= 3600:
        raise argparse.ArgumentTypeError(f"must be between 0.1 and 3600 seconds, got {text}")
    return value


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--db", help="database URL or SQLite path (default: $BENCHLOG_DB, then ./benchlog.sqlite)")
    p.add_argument("--every", type=_seconds, default=1.0, metavar="SECONDS", help="read the store this often")


def run(args: argparse.Namespace) -> int:
    import sys

    if not sys.stdout.isatty():
        # no terminal to draw on: print what the first screens would show
        from benchlog.errors import StoreError
        from benchlog.store import Store
        from benchlog.views._notes import say_readonly
        from benchlog.views.tui._summary import summary_text

        try:
            store = Store.open(args.db, readonly=True, inert_names=True)
        except StoreError as exc:
            print(f"benchlog: {exc}", file=sys.stderr)
            return exc.exit_code
        with store:
            say_readonly(store)
            print(summary_text(store))
        return 0
    from benchlog.views.tui import BenchDashboard

    BenchDashboard(args.db, refresh_s=args.every, quit_on_signals=True).run()
    return 0
