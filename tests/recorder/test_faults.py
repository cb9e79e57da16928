"""Faults across processes: a recorder killed outright, a second recorder on a live bench, and two
recorders of two benches writing one store at once."""

import os
import signal
import sqlite3

import pytest

from benchlog.store import Store
from tests.conftest import wait_until

RECORD = ["record", "--sim", "demo", "--sim-speed", "10", "--quiet"]


def _cycles(db: str, run_id: int = 1) -> int:
    try:
        with Store.open(db, readonly=True) as s:
            return s.run(run_id).cycles_done
    except Exception:  # not created yet
        return 0


def test_kill_9_keeps_committed_data_and_resume_continues(tmp_path, children):
    db = str(tmp_path / "kill.sqlite")
    p = children.benchlog(
        *RECORD,
        "--bench",
        "bench K",
        "--profile",
        "50:50:100000",
        "--units",
        "0=K0",
        "1=K1",
        "--part",
        "AG-MS5",
        "--window",
        "10",
        "--db",
        db,
    )
    wait_until(lambda: _cycles(db) >= 40, "40 committed cycles")
    p.signal(signal.SIGKILL)
    rc, _, _ = p.finish()
    assert rc == -signal.SIGKILL
    con = sqlite3.connect(db)
    assert con.execute("PRAGMA integrity_check").fetchone() == ("ok",)
    con.close()
    with Store.open(db, readonly=True) as s:
        run = s.run(1)
        assert run.ended_at is None and run.state in ("interrupted", "live")
        before = {u.unit.id: u.cycles_done for u in s.run_units(1)}
        acts = s.actuations(runs=[1])
        assert len(acts) >= 2 * 40 * 2 and min(before.values()) >= 40
        assert len(s.trend(acts["unit_id"][0], "bounce_us")) >= 3
        last = {u: int(acts["cycle"][acts["unit_id"] == u].max()) for u in before}

    # resume at once: the dead recorder's lease is recognised and taken over
    p = children.benchlog(
        "record", "--sim", "demo", "--sim-speed", "10", "--resume", "1", "--quiet", "--db", db
    )
    wait_until(lambda: _cycles(db) >= max(before.values()) + 20, "20 more cycles")
    p.signal(signal.SIGINT)
    rc, out, err = p.finish()
    assert rc == 0, err
    assert "ended (stopped)" in out
    with Store.open(db, readonly=True) as s:
        run = s.run(1)
        assert run.segments == 2 and run.end_reason == "stopped"
        for unit, n in last.items():
            cyc = s.actuations(units=[unit], kind="make")["cycle"]
            assert list(cyc) == list(range(len(cyc)))  # numbering continues without a gap or repeat
            assert cyc.max() > n


@pytest.fixture(params=["sqlite", "postgresql"])
def shared_db(request, tmp_path):
    if request.param == "sqlite":
        yield str(tmp_path / "shared.sqlite")
        return
    yield request.getfixturevalue("pg_url")


def test_second_recorder_on_a_live_bench_is_refused(shared_db, children):
    p = children.benchlog(
        *RECORD,
        "--bench",
        "bench S",
        "--profile",
        "50:50:100000",
        "--units",
        "0=S0",
        "--part",
        "AG-MS5",
        "--db",
        shared_db,
    )
    wait_until(lambda: _cycles(shared_db) >= 5, "the first recorder to run")
    q = children.benchlog(
        *RECORD,
        "--bench",
        "bench S",
        "--profile",
        "50:50:10",
        "--units",
        "1=S1",
        "--part",
        "AG-MS5",
        "--db",
        shared_db,
    )
    rc, out, err = q.finish()
    assert rc == 7, err  # StoreBusyError
    assert "being recorded by process" in err and str(p.pid) in err and err.count("\n") == 1
    r = children.benchlog("record", "--sim", "demo", "--resume", "1", "--quiet", "--db", shared_db)
    rc, out, err = r.finish()
    assert rc == 7 and "being recorded" in err
    p.signal(signal.SIGTERM)
    rc, out, err = p.finish()
    assert rc == 0, err
    with Store.open(shared_db, readonly=True) as s:
        (run,) = s.runs()
        assert run.end_reason == "stopped" and run.units == 1


def test_two_benches_record_into_one_store_at_once(shared_db, children):
    procs = [
        children.benchlog(
            *RECORD,
            "--bench",
            f"bench {i}",
            "--profile",
            "20:20:60",
            "--units",
            f"{i}=P{i}",
            "--part",
            "AG-R12",
            "--sim-seed",
            str(i),
            "--db",
            shared_db,
        )
        for i in (0, 1)
    ]
    for p in procs:
        rc, out, err = p.finish()
        assert rc == 0, err
    with Store.open(shared_db, readonly=True) as s:
        runs = s.runs()
        assert sorted(r.bench for r in runs) == ["bench 0", "bench 1"]
        assert all(r.end_reason == "target" and r.cycles_done == 60 for r in runs)
        assert len(s.actuations(parts=["AG-R12"])) == 2 * 60 * 2
        assert os.environ.get("BENCHLOG_DEBUG") is None


@pytest.mark.parametrize(
    ("sigint", "stop_with"),
    [("ignored", signal.SIGTERM), ("default", signal.SIGHUP)],
    ids=["sigterm-from-a-service-manager", "sighup-terminal-closed"],
)
def test_stop_signal_flushes_and_ends_the_run_as_stopped(tmp_path, children, sigint, stop_with):
    # a service manager stops `record` with SIGTERM (started as a background job, SIGINT ignored);
    # a closed terminal sends SIGHUP: either way what arrived is committed and the run ends "stopped"
    db = str(tmp_path / "stop.sqlite")
    p = children.benchlog(
        *RECORD,
        "--bench",
        "bench T",
        "--profile",
        "50:50:100000",
        "--units",
        "0=T0",
        "1=T1",
        "--part",
        "AG-MS5",
        "--db",
        db,
        sigint=sigint,
    )
    wait_until(lambda: _cycles(db) >= 10, "10 committed cycles")
    p.signal(stop_with)
    rc, out, err = p.finish()
    assert rc == 0, err
    assert "ended (stopped)" in out
    with Store.open(db, readonly=True) as s:
        run = s.run(1)
        assert run.end_reason == "stopped" and run.ended_at is not None
        assert run.cycles_done >= 10
        acts = s.actuations(runs=[1])
        # every cycle the run counts has its make and its break stored (nothing left in memory)
        for u in s.run_units(1):
            made = acts["cycle"][(acts["unit_id"] == u.unit.id)]
            assert len(made) >= 2 * u.cycles_done - 1
