"""A unit is on one bench at a time: its life in cycles is one sequence (common practice, no source).

Seen on a shared store: a second bench's `record` started on units a live run on another bench was
cycling. Both runs numbered the same life cycles, and the second recorder died mid-run on the store's
unique (unit, cycle, kind) key. A new run on a unit of a live run is now refused before anything is
written, and an interrupted run whose units have since been in a later run cannot be resumed (its
cycles would be counted twice).
"""

from __future__ import annotations

import sqlite3
import subprocess
import sys

import numpy as np
import pytest
from sqlalchemy import func, select, update

from benchlog.errors import StoreBusyError, StoreError
from benchlog.store import _schema as sch
from tests.store._data import actuations


def _units(store, n=2):
    part = store.register_part("VS-505", "Vellmar Switchgear")
    lot = store.register_lot(part, "L-2026-09")
    return [store.register_unit(lot, f"VS-{i:03d}") for i in range(n)]


def _start(store, bench: str, units):
    return store.start_run(
        store.register_bench(bench), dict(enumerate(units)), profile={"on_ms": 50, "off_ms": 50}
    )


def _runs(store) -> int:
    with store.engine.connect() as c:
        return c.execute(select(func.count()).select_from(sch.Run)).scalar()


def test_a_unit_in_a_live_run_on_another_bench_is_refused(open_store):
    a, b = open_store(), open_store()  # two recorders, two connections
    units = _units(a)
    first = _start(a, "bench A", units)
    first.add(actuations=actuations([0, 1], range(20)))
    first.flush()
    with pytest.raises(StoreBusyError, match=r"unit 'VS-000' is in run \d+, still being recorded"):
        _start(b, "bench B", units[:1])
    assert _runs(b) == 1  # nothing written
    assert not [x for x in b.benches() if x.name == "bench B" and x.recording]  # its lease let go
    first.close("target")
    second = _start(b, "bench B", units)  # once that run has ended the units go on
    second.add(actuations=actuations([0, 1], range(5)))
    second.close("target")
    got = b.actuations(units=[units[0]], kind="make")
    assert list(got["cycle"]) == list(range(25))  # one life: 20 cycles, then 5 more


def test_a_run_whose_units_went_on_elsewhere_cannot_be_resumed(open_store):
    store = open_store()
    units = _units(store)
    old = _start(store, "bench A", units)
    old.add(actuations=actuations([0, 1], range(10)))
    old.flush()
    old.abandon()  # killed: no end, and its lease lapses
    with store.engine.begin() as c:
        c.execute(update(sch.Bench).values(lease_until=0.0))
    new = _start(store, "bench B", units)  # an interrupted run does not hold its units
    new.add(actuations=actuations([0, 1], range(7)))
    new.close("target")
    with pytest.raises(StoreError, match=rf"run {old.run_id} cannot be resumed: unit .VS-000. has been in"):
        store.resume_run(old.run_id)
    cycles = store.actuations(units=[units[1]], kind="make")["cycle"]
    assert list(cycles) == list(range(17)) and np.all(np.diff(cycles) == 1)


def test_two_benches_recording_the_same_units_one_is_refused_and_the_store_holds(tmp_path):
    """End to end, as seen: `record` on bench A, and while it runs `record` on bench B with the same
    simulated units into the same SQLite file."""
    db = str(tmp_path / "lab.sqlite")
    base = [sys.executable, "-m", "benchlog", "record", "--sim", "demo", "--db", db, "--quiet"]
    first = subprocess.Popen(
        [*base, "--bench", "A", "--profile", "50:50:400", "--sim-speed", "10"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        said = first.stderr.readline()  # printed once the run is started
        assert "recording run" in said, said + first.stderr.read()
        second = subprocess.run(
            [*base, "--bench", "B", "--profile", "50:50:50", "--sim-speed", "10"],
            capture_output=True,
            text=True,
        )
        assert second.returncode == 7, second.stderr
        err = second.stderr.strip().splitlines()
        assert len(err) == 1 and "is in run 1, still being recorded" in err[0] and "Traceback" not in err[0]
        out, rest = first.communicate()
    finally:
        if first.poll() is None:
            first.kill()
            first.communicate()
    assert first.returncode == 0, rest
    assert "run 1 ended (target): 400 cycles" in out
    con = sqlite3.connect(db)
    try:
        assert con.execute("PRAGMA integrity_check").fetchone() == ("ok",)
        assert con.execute("SELECT COUNT(*) FROM runs").fetchone() == (1,)
    finally:
        con.close()
