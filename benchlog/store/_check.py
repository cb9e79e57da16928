"""`benchlog db check`: the database engine's own integrity check, then benchlog's invariants.

- SQLite: `PRAGMA integrity_check` (every page, index and constraint) and `PRAGMA foreign_key_check`.
- PostgreSQL: the server keeps no page check of its own; with the `amcheck` extension installed,
  `bt_index_check` verifies each of benchlog's B-tree indexes, else that check is reported skipped.
- Invariants: every actuation's unit and run exist; no unit has two actuations of one kind in one
  cycle; every rollup window's count equals the actuations it summarises.
"""

from __future__ import annotations

from dataclasses import dataclass

from sqlalchemy import text
from sqlalchemy.exc import SQLAlchemyError

from benchlog.analysis._types import INCOMPLETE
from benchlog.errors import StoreError

from ._engine import _one_line
from ._schema import ROLLUP_METRICS


@dataclass(frozen=True, slots=True)
class Finding:
    name: str
    ok: bool | None  # None: the check could not run here (said why in `detail`)
    detail: str


def check(engine) -> list[Finding]:
    """Run every check; a check that cannot read its tables is a failed finding, not an exception."""
    out: list[Finding] = []
    steps = {
        "integrity": _engine_check,
        "actuation units": _orphans,
        "cycle numbers": _duplicates,
        "rollups": _rollups,
    }
    for name, step in steps.items():
        try:
            with engine.connect() as c:
                out.extend(step(c))
        except (SQLAlchemyError, StoreError) as exc:
            # the driver's own words: the StoreError of a damaged file points back at this command
            cause = exc.__cause__ if isinstance(exc, StoreError) and exc.__cause__ is not None else exc
            out.append(Finding(name, False, _one_line(cause)))
    return out


def _engine_check(c) -> list[Finding]:
    if c.dialect.name == "sqlite":
        lines = [r[0] for r in c.exec_driver_sql("PRAGMA integrity_check").all()]
        ok = lines == ["ok"]
        found = [
            Finding(
                "integrity", ok, "ok" if ok else "; ".join(lines[:5]) + (" ..." if len(lines) > 5 else "")
            )
        ]
        fk = c.exec_driver_sql("PRAGMA foreign_key_check").all()
        found.append(
            Finding("foreign keys", not fk, "ok" if not fk else f"{len(fk)} rows point at missing rows")
        )
        return found
    has = c.execute(text("SELECT 1 FROM pg_extension WHERE extname = 'amcheck'")).first()
    if has is None:
        return [
            Finding("integrity", None, "skipped: install the amcheck extension for PostgreSQL's index check")
        ]
    indexes = c.execute(
        text(
            "SELECT i.indexrelid::regclass::text FROM pg_index i JOIN pg_class t ON t.oid = i.indrelid "
            "JOIN pg_am a ON a.oid = (SELECT relam FROM pg_class WHERE oid = i.indexrelid) "
            "WHERE a.amname = 'btree' AND t.relnamespace = to_regnamespace(current_schema())::oid"
        )
    ).scalars()
    bad = []
    for name in indexes:
        try:
            c.execute(text("SELECT bt_index_check(CAST(:n AS regclass))"), {"n": name})
        except SQLAlchemyError as exc:
            bad.append(f"{name}: {_one_line(exc)}")
            c.rollback()
    return [Finding("integrity", not bad, "ok (amcheck)" if not bad else "; ".join(bad[:5]))]


def _orphans(c) -> list[Finding]:
    units = c.execute(
        text(
            "SELECT count(*) FROM actuations a "
            "WHERE NOT EXISTS (SELECT 1 FROM units u WHERE u.id = a.unit_id)"
        )
    ).scalar()
    runs = c.execute(
        text(
            "SELECT count(*) FROM actuations a WHERE NOT EXISTS (SELECT 1 FROM runs r WHERE r.id = a.run_id)"
        )
    ).scalar()
    return [
        Finding(
            "actuation units", units == 0, "ok" if not units else f"{units} actuations of a missing unit"
        ),
        Finding("actuation runs", runs == 0, "ok" if not runs else f"{runs} actuations of a missing run"),
    ]


def _duplicates(c) -> list[Finding]:
    n = c.execute(
        text(
            "SELECT count(*) FROM (SELECT 1 FROM actuations GROUP BY unit_id, cycle, kind "
            "HAVING count(*) > 1) AS d"
        )
    ).scalar()
    return [
        Finding("cycle numbers", n == 0, "ok" if not n else f"{n} (unit, cycle, kind) held more than once")
    ]


def _rollups(c) -> list[Finding]:
    """Each written window's count of each metric against the actuations it covers (windows still
    open in a live run have no rollup yet and are not compared). One statement, so one snapshot: a
    recorder committing meanwhile cannot make rows and rollups seem to disagree."""
    # SQLite stores NaN as NULL; PostgreSQL keeps NaN, which a rollup leaves out all the same
    nan = " AND a.{m} <> 'NaN'::float8" if c.dialect.name == "postgresql" else ""
    cols = ", ".join(
        f"SUM(CASE WHEN a.{m} IS NOT NULL{nan.format(m=m)} AND (a.flags & {INCOMPLETE}) = 0 "
        f"THEN 1 ELSE 0 END) AS n_{m}"
        for m in ROLLUP_METRICS
    )
    pick = " ".join(f"WHEN '{m}' THEN g.n_{m}" for m in ROLLUP_METRICS)
    wrong, windows = c.execute(
        text(
            "SELECT SUM(CASE WHEN ro.count <> COALESCE(CASE ro.metric "
            f"{pick} END, 0) THEN 1 ELSE 0 END), count(*) FROM rollups ro LEFT JOIN ("
            f"SELECT a.unit_id AS u, a.run_id AS r, a.kind AS k, a.cycle / rr.rollup_window AS w, {cols} "
            "FROM actuations a JOIN runs rr ON rr.id = a.run_id "
            "GROUP BY a.unit_id, a.run_id, a.kind, a.cycle / rr.rollup_window) AS g "
            "ON g.u = ro.unit_id AND g.r = ro.run_id AND g.k = ro.kind AND g.w = ro.window_no"
        )
    ).one()
    wrong, windows = int(wrong or 0), int(windows or 0)
    detail = (
        f"ok ({windows} windows)"
        if not wrong
        else f"{wrong} of {windows} rollup windows disagree with their rows"
    )
    return [Finding("rollups", wrong == 0, detail)]
