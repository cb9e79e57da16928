"""`benchlog db`: the database's schema revision; apply pending migrations."""

from __future__ import annotations

import argparse

NAME = "db"
HELP = (
    "Show the database's schema revision (status), apply pending migrations (upgrade), or check the "
    "database and benchlog's invariants (check)."
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "action",
        metavar="ACTION",
        choices=("status", "upgrade", "check"),
        help="status: show revisions; upgrade: migrate; check: integrity and invariants (exit 1 if any fail)",
    )
    p.add_argument("--db", help="database URL or SQLite file (default: $BENCHLOG_DB or ./benchlog.sqlite)")


def run(args: argparse.Namespace) -> int:
    from pathlib import Path

    from sqlalchemy.engine import make_url

    from benchlog.errors import StoreError
    from benchlog.store import resolve_url
    from benchlog.store._engine import is_empty, make_engine
    from benchlog.store._migrate import status, upgrade

    url = resolve_url(args.db)
    parsed = make_url(url)
    shown = parsed.database if parsed.get_backend_name() == "sqlite" else parsed.render_as_string()
    if (
        args.action in ("status", "check")
        and parsed.get_backend_name() == "sqlite"
        and not Path(parsed.database).exists()
    ):
        raise StoreError(f"no database at {shown}")
    engine = make_engine(url, readonly=args.action != "upgrade")
    try:
        if args.action == "check":
            return _check(engine, url, shown)
        st = status(engine)
        if args.action == "status":
            from benchlog.store import Store
            from benchlog.views._notes import say_readonly

            say_readonly(Store(engine, url, readonly=True))
            print(f"database  {shown}")
            print(f"revision  {st.current or 'none (no benchlog schema)'}")
            print(f"latest    {st.head}")
            print("pending   " + (", ".join(st.pending) if st.pending else "none"))
            return 0 if st.up_to_date else 1
        if st.current is None and not is_empty(engine):
            raise StoreError(f"{shown} holds other tables and no benchlog schema; not touching it")
        before, after = upgrade(engine)
        if before == after:
            print(f"{shown}: already at revision {after}")
        else:
            print(f"{shown}: upgraded from {before or 'empty'} to {after} ({', '.join(st.pending)})")
        return 0
    finally:
        engine.dispose()


def _check(engine, url: str, shown: str) -> int:
    from benchlog.store import Store
    from benchlog.store._check import check
    from benchlog.views._notes import say_readonly

    say_readonly(Store(engine, url, readonly=True))
    print(f"database  {shown}")
    findings = check(engine)
    for f in findings:
        mark = "ok" if f.ok else ("--" if f.ok is None else "FAILED")
        print(f"{mark:<7} {f.name:<16} {f.detail}")
    bad = [f.name for f in findings if f.ok is False]
    print("result  " + ("sound" if not bad else f"damaged: {', '.join(bad)}"))
    return 1 if bad else 0
