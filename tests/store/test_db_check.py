"""`benchlog db check`, and a damaged database as one clear line (naming `db check`) in every command."""

from __future__ import annotations

import shutil
import sqlite3

import numpy as np
import pytest
from sqlalchemy import text

from benchlog.store import Store
from benchlog.views.cli import main
from tests.report.storefill import fill
from tests.store._data import actuations, downgrade_to


@pytest.fixture(scope="module")
def sound_db(tmp_path_factory):
    return fill(
        tmp_path_factory.mktemp("sound") / "lab.sqlite", units_per_lot=4, recorded=60, test_end=20_000
    )


def _damage(src: str, dst, *tables: str) -> str:
    """A copy of `src` with one leaf page of each of `tables` overwritten in the middle of the file
    (SQLite's dbstat virtual table says which pages hold a table)."""
    shutil.copy(src, dst)
    con = sqlite3.connect(dst)
    try:
        page_size = con.execute("PRAGMA page_size").fetchone()[0]
        leaves = [
            [
                r[0]
                for r in con.execute(
                    "SELECT pageno FROM dbstat WHERE name = ? AND pagetype = 'leaf'", (table,)
                )
            ]
            for table in tables
        ]
    finally:
        con.close()
    with open(dst, "r+b") as fh:
        for pages in leaves:
            assert len(pages) >= 3
            fh.seek((pages[len(pages) // 2] - 1) * page_size)
            fh.write(b"\xab" * page_size)
    return str(dst)


def test_db_check_passes_a_sound_store(sound_db, capsys):
    assert main(["db", "check", "--db", sound_db]) == 0
    out = capsys.readouterr().out
    for name in ("integrity", "actuation units", "actuation runs", "cycle numbers", "rollups"):
        assert any(line.startswith("ok") and name in line for line in out.splitlines()), (name, out)
    assert "result  sound" in out


def test_db_check_on_postgresql(pg_url, capsys):
    with Store.open(pg_url) as store:
        part = store.register_part("AG-R12", "Ashgrove Components")
        unit = store.register_unit(store.register_lot(part, "L1"), "R-001")
        w = store.start_run(store.register_bench("b"), {0: unit}, profile={}, rollup_window=10)
        w.add(actuations=actuations([0], range(35)))
        w.close("stopped")
    assert main(["db", "check", "--db", pg_url]) == 0
    out = capsys.readouterr().out
    assert "cycle numbers" in out and "rollups          ok (" in out and "result  sound" in out


def test_db_check_finds_rollups_that_disagree_with_their_rows(db_url, capsys):
    with Store.open(db_url) as store:
        part = store.register_part("AG-R12", "Ashgrove Components")
        unit = store.register_unit(store.register_lot(part, "L1"), "R-001")
        w = store.start_run(store.register_bench("b"), {0: unit}, profile={}, rollup_window=10)
        w.add(actuations=actuations([0], range(35)))
        w.close("stopped")
        assert main(["db", "check", "--db", db_url]) == 0
        with store.engine.begin() as c:  # rows lost behind the rollups' back
            c.execute(text("DELETE FROM actuations WHERE cycle IN (3, 4)"))
    capsys.readouterr()
    assert main(["db", "check", "--db", db_url]) == 1
    out = capsys.readouterr().out
    assert "FAILED  rollups" in out and "result  damaged: rollups" in out


def test_a_damaged_store_is_one_line_naming_db_check_everywhere(sound_db, tmp_path, capsys):
    # both what export reads (the actuations) and what qualify reads (the per-window summaries)
    db = _damage(sound_db, tmp_path / "damaged.sqlite", "actuations", "summaries")
    assert main(["db", "check", "--db", db]) == 1
    out = capsys.readouterr().out
    assert "FAILED  integrity" in out and "result  damaged" in out
    lots = ["--incumbent", "AG-MS5", "--candidate", "VS-505", "--resamples", "100"]
    for argv in (
        ["export", "csv", "--out", str(tmp_path / "x.csv")],
        ["qualify", *lots],
        ["report", *lots, "--output", str(tmp_path / "r.html")],
    ):
        code = main([*argv, "--db", db])
        err = capsys.readouterr().err
        assert code == 6, (argv, err)  # StoreError, not an internal error (70)
        assert err.count("\n") == 1 and "damaged" in err and "benchlog db check" in err, (argv, err)


def test_duplicate_rows_are_found(db_url, capsys):
    from benchlog.store._engine import make_engine
    from benchlog.store._migrate import upgrade
    from benchlog.store._write import bulk_insert_actuations, to_stored

    engine = make_engine(db_url)
    try:
        upgrade(engine)
        old = Store(engine, db_url, readonly=False)
        part = old.register_part("AG-R12", "Ashgrove Components")
        unit = old.register_unit(old.register_lot(part, "L1"), "R-001")
        w = old.start_run(old.register_bench("b"), {0: unit}, profile={})
        w.add(actuations=actuations([0], range(3)))
        w.close("stopped")
        downgrade_to(engine, "0003")  # before the unique key
        with engine.begin() as c:
            bulk_insert_actuations(
                c, to_stored(actuations([0], [1]), np.array([unit, unit]), w.run_id).tolist()
            )
    finally:
        engine.dispose()
    # the check reads any revision (it is how one finds what an upgrade would remove)
    assert main(["db", "check", "--db", db_url]) == 1
    out = capsys.readouterr().out
    assert "FAILED  cycle numbers    2 (unit, cycle, kind) held more than once" in out
