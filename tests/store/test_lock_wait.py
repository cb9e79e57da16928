"""A recorder's commit that meets another program's write lock is put off, not fatal, and loses nothing.

Several benches share one SQLite store, and `db` commands write to it too. A recorder whose commit waited
past SQLite's busy timeout used to end its run ("database is locked"). Now the batch is kept whole and
goes with the next flush; the store must end up holding exactly what a store that was never locked holds.
"""

from __future__ import annotations

import sqlite3
import subprocess
import sys
import threading

import numpy as np

from benchlog.analysis._types import FAIL, MAKE
from benchlog.events import Incident
from benchlog.store import Store
from tests.store._data import actuations, edges

CYCLES = 60
BATCH = 10
LOCKED_FLUSHES = (2, 3)  # the batches whose flush meets the lock held by another program

# columns that differ between two stores by when they were written, not by what was written
_WHEN = {"id", "created_at", "updated_at", "heartbeat_at", "started_at", "ended_at", "lease_until"}
_TABLES = ("actuations", "edge_chunks", "incidents", "rollups", "summaries", "run_units", "unit_life")


def _record(url: str, lock_path: str | None) -> dict:
    """One run of two units fed in batches; with `lock_path`, another connection holds the store's
    write lock over the flushes of LOCKED_FLUSHES. Returns what each flush said."""
    store = Store.open(url)
    try:
        part = store.register_part("HX-40", "Harlow Relays")
        lot = store.register_lot(part, "L-7")
        units = [store.register_unit(lot, f"HX-{i:02d}") for i in range(2)]
        bench = store.register_bench("bench L")
        w = store.start_run(bench, dict(enumerate(units)), profile={}, rollup_window=BATCH)
        a = actuations([0, 1], range(CYCLES), seed=11)
        a["verdict"][(a["channel"] == 1) & (a["cycle"] == 27)] = FAIL  # unit 1's first break, locked batch
        holder = None
        said = []
        for i, lo in enumerate(range(0, CYCLES, BATCH)):
            mine = a[(a["cycle"] >= lo) & (a["cycle"] < lo + BATCH)]
            inc = Incident("disconnect", lo * 100_000_000, lo * 100_000_000 + 5, 0, 0, 3, 0, f"batch {i}")
            w.add(actuations=mine, edges=edges([0, 1], 40, t0=lo * 100_000_000), incidents=[inc])
            if i == LOCKED_FLUSHES[0]:
                w.mark_failed(units[1], 27, "welded")
                w.mark_drift(units[0], "bounce_us", MAKE, 24)
            if lock_path and i == LOCKED_FLUSHES[0]:
                holder = sqlite3.connect(lock_path, isolation_level=None)
                holder.execute("BEGIN IMMEDIATE")  # the write lock, as a second writer holds it
            if lock_path and holder is not None and i > LOCKED_FLUSHES[-1]:
                holder.execute("COMMIT")
                holder.close()
                holder = None
            said.append(getattr(w.flush(), "put_off", False))
        w.close("target")
        return {"put_off": said, "writer": w}
    finally:
        store.close()


def _contents(path: str) -> dict:
    con = sqlite3.connect(path)
    try:
        out = {}
        for table in _TABLES:
            cols = [r[1] for r in con.execute(f"pragma table_info({table})") if r[1] not in _WHEN]
            cols = [c for c in cols if not c.endswith("_at")]
            rows = con.execute(f"select {', '.join(cols)} from {table}").fetchall()
            out[table] = (cols, sorted(rows, key=repr))
        return out
    finally:
        con.close()


def test_a_commit_that_meets_another_writers_lock_is_put_off_and_the_store_ends_the_same(tmp_path):
    plain, locked = tmp_path / "plain.sqlite", tmp_path / "locked.sqlite"
    first = _record(f"sqlite:///{plain}", None)
    second = _record(f"sqlite:///{locked}", str(locked))
    assert first["put_off"] == [False] * (CYCLES // BATCH)
    # the flushes under the lock were put off; the first one after it committed all of it
    assert second["put_off"] == [i in LOCKED_FLUSHES for i in range(CYCLES // BATCH)]
    assert second["writer"].commits_put_off == len(LOCKED_FLUSHES)
    want, got = _contents(str(plain)), _contents(str(locked))
    for table in _TABLES:
        assert got[table] == want[table], table
    # and it is a whole night's worth, not two equally empty stores
    assert len(got["actuations"][1]) == 2 * 2 * CYCLES
    assert len(got["incidents"][1]) == CYCLES // BATCH
    cols, rows = got["unit_life"]
    drift, failed = sorted((dict(zip(cols, r, strict=True)) for r in rows), key=lambda d: d["unit_id"])
    assert failed["first_break_cycle"] == 27 and failed["failed_at_cycle"] == 27
    assert failed["failed_at_ns"] is not None  # read back from the stored break at the late commit
    assert drift["first_drift_cycle"] == 24


def test_a_final_flush_waits_the_lock_out(tmp_path):
    """The run's last flush and its end are not put off: they wait until the lock is let go."""
    path = tmp_path / "store.sqlite"
    store = Store.open(f"sqlite:///{path}")
    try:
        part = store.register_part("HX-40", "Harlow Relays")
        unit = store.register_unit(store.register_lot(part, "L-7"), "HX-00")
        w = store.start_run(store.register_bench("bench L"), {0: unit}, profile={}, rollup_window=BATCH)
        w.add(actuations=actuations([0], range(25), seed=2))
        holder = sqlite3.connect(path, isolation_level=None, check_same_thread=False)
        holder.execute("BEGIN IMMEDIATE")
        waiting = threading.Event()
        closed = threading.Event()

        def close() -> None:
            waiting.set()
            w.close("target")
            closed.set()

        t = threading.Thread(target=close)
        t.start()
        waiting.wait(60)
        # the closing writer still waits while the lock is held past SQLite's busy timeout (10 s), the
        # longest a single attempt ever waited
        assert not closed.wait(11.0)
        holder.execute("COMMIT")
        holder.close()
        t.join(120)
        assert closed.is_set()
        run = store.runs()[0]
        assert run.end_reason == "target"
        stored = store.actuations()
        assert len(stored) == 50 and np.array_equal(np.sort(stored["cycle"]), np.repeat(np.arange(25), 2))
    finally:
        store.close()


def test_record_goes_on_while_another_program_holds_the_store_past_the_busy_timeout(tmp_path):
    """End to end, as a lab saw it: `record` on a shared SQLite file, and another program takes the write
    lock for longer than SQLite's busy timeout (10 s) mid-run. The recording used to end there with
    "database is locked"; it now keeps its batches and commits them once the lock is let go."""
    db = tmp_path / "lab.sqlite"
    cmd = [sys.executable, "-m", "benchlog", "record", "--sim", "demo", "--db", str(db), "--quiet"]
    rec = subprocess.Popen(
        [*cmd, "--bench", "A", "--profile", "50:50:1000", "--sim-speed", "10"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        said = rec.stderr.readline()  # printed once the run is started
        assert "recording run" in said, said + rec.stderr.read()
        holder = sqlite3.connect(db, isolation_level=None, timeout=60)
        holder.execute("BEGIN IMMEDIATE")
        # held past the busy timeout; meanwhile the recorder must stay alive (the old one died at 10 s)
        try:
            rec.wait(12.0)
        except subprocess.TimeoutExpired:
            pass
        holder.execute("COMMIT")
        holder.close()
        out, rest = rec.communicate(timeout=600)
    finally:
        if rec.poll() is None:
            rec.kill()
            rec.communicate()
    assert rec.returncode == 0, rest
    assert "run 1 ended (target): 1,000 cycles" in out, out + rest
    con = sqlite3.connect(db)
    try:
        assert con.execute("PRAGMA integrity_check").fetchone() == ("ok",)
        units = con.execute("select unit_id, cycles_done from run_units where run_id = 1").fetchall()
        assert len(units) == 16  # the demo bench
        for unit, done in units:
            (cycles,) = con.execute(
                "select count(distinct cycle) from actuations where unit_id = ? and run_id = 1", (unit,)
            ).fetchone()
            # every cycle the recorder counted has its rows (a batch lost to the lock would leave a hole)
            assert cycles == done, (unit, cycles, done)
    finally:
        con.close()
