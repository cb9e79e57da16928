"""The recorder end to end: simulated sampler -> pty -> pyserial -> ingest -> analysis -> store."""

import sqlite3

import numpy as np
import pytest
from sqlalchemy import event

from benchlog.analysis import MAKE
from benchlog.errors import StoreError
from benchlog.events import DISCONNECT
from benchlog.store import Store
from benchlog.views.cli import main
from tests.recorder._helpers import demo_config, record_sim


def test_records_every_cycle_and_edge(open_store):
    store = open_store()
    reason, w, rec, sim, counters = record_sim(store, demo_config(), [0, 1], cycles=120)
    assert reason == "target"
    run = store.run(w.run_id)
    assert run.end_reason == "target" and run.cycles_done == 120 and run.state == "ended"
    for ru in store.run_units(w.run_id):
        acts = store.actuations(units=[ru.unit.id])
        assert len(acts) == 240  # one make and one break per cycle
        assert list(acts["cycle"][acts["kind"] == MAKE]) == list(range(120))
        assert ru.cycles_done == 120 and ru.unit.status == "alive" and ru.unit.cycles == 120
        tr = store.trend(ru.unit.id, "bounce_us", kind="make")
        assert list(tr.cycle_lo) == list(range(0, 120, 20)) and tr.count.sum() > 0
    # every edge the sampler sent arrived and is stored (no faults in this run)
    sent = sim.bench.truth.sent
    stored = sum(len(store.edges(u)) for u in w.units.values())
    assert stored == counters.edges == int(np.isin(sent["channel"], [0, 1]).sum())
    assert store.incidents(w.run_id) == []


def test_port_outage_is_one_incident_and_nothing_received_is_lost(open_store):
    store = open_store()
    cfg = demo_config(pull_at_s=3.0, pull_for_s=1.0)  # at x4: the sampler runs on 4 s unheard
    reason, w, rec, sim, counters = record_sim(store, cfg, [0, 1], cycles=120, speed=4.0)
    assert len(sim.outages) == 1
    (inc,) = store.incidents(w.run_id, kind=DISCONNECT)
    assert 0.8 <= inc.duration_s <= 3.0  # the cable was out 1 s of wall time
    assert 3.2e9 <= inc.t_end_ns - inc.t_start_ns <= 12e9  # about 4 s of sampler time at x4
    stored = sum(len(store.edges(u)) for u in w.units.values())
    assert stored == counters.edges  # every edge received is in the store
    lost = sum(i.edges_lost or 0 for i in store.incidents(w.run_id))
    sent = sim.bench.truth.sent
    assert stored + lost == int(np.isin(sent["channel"], [0, 1]).sum())  # the rest is reported lost
    acts = store.actuations(units=[w.units[0]])
    assert (acts["t_start_ns"] > inc.t_end_ns).any()  # the run went on after the outage
    # cycles the sampler ran while unheard are lost (and reported): the run ends when it stops
    assert reason in ("target", "sampler_idle") and store.run(w.run_id).end_reason == reason


def test_disk_full_stops_cleanly_and_keeps_what_was_committed(tmp_path):
    path = tmp_path / "full.sqlite"
    store = Store.open(str(path))
    pages = store.engine.connect().exec_driver_sql("PRAGMA page_count").scalar() + 40

    # SQLite's max_page_count caps the file: past it every write fails with SQLITE_FULL, exactly as a
    # full disk does ("database or disk is full")
    @event.listens_for(store.engine, "connect")
    def _cap(dbapi_connection, _record):
        dbapi_connection.execute(f"PRAGMA max_page_count={pages}")

    store.engine.dispose()
    try:
        with pytest.raises(StoreError, match="disk is full"):
            record_sim(store, demo_config(), [0, 1, 2, 3], cycles=2000, timeout_s=40)
    finally:
        store.close()
    con = sqlite3.connect(path)
    assert con.execute("PRAGMA integrity_check").fetchone() == ("ok",)
    n = con.execute("SELECT count(*) FROM actuations").fetchone()[0]
    done = con.execute("SELECT cycles_done, ended_at FROM runs").fetchone()
    con.close()
    assert n > 0 and done[0] > 0 and done[1] is None  # committed data stays; the run is resumable


def test_read_only_database_is_a_one_line_error(tmp_path, capsys):
    path = tmp_path / "ro.sqlite"
    Store.open(str(path)).close()
    url = f"sqlite:///file:{path}?mode=ro&uri=true"
    code = main(
        [
            "record",
            "--sim",
            "demo",
            "--bench",
            "b",
            "--profile",
            "50:50:10",
            "--units",
            "0=X",
            "--part",
            "P",
            "--db",
            url,
        ]
    )
    err = capsys.readouterr().err
    assert code == 6 and err.count("\n") == 1 and "read-only" in err and "Traceback" not in err


def test_record_command_stores_names_verbatim(tmp_path, capsys):
    db = str(tmp_path / "cli.sqlite")
    nasty_serial = "S'1\"; DROP TABLE units; --<b>[red]x[/red]</b>"
    nasty_lot = "L'1 OR 1=1"
    code = main(
        [
            "record",
            "--sim",
            "demo",
            "--sim-speed",
            "20",
            "--bench",
            "Bench 'A'; --",
            "--profile",
            "50:50:30",
            "--units",
            f"0=AG-MS5/{nasty_lot}/{nasty_serial}",
            "1=U2",
            "--part",
            "VS-505",
            "--quiet",
            "--db",
            db,
        ]
    )
    out = capsys.readouterr().out
    assert code == 0 and "ended (target)" in out
    with Store.open(db, readonly=True) as store:
        (run,) = store.runs()
        assert run.bench == "Bench 'A'; --" and run.cycles_done == 30 and run.board_id == "BW-BENCH-A"
        serials = {u.unit.serial: u.unit for u in store.run_units(run.id)}
        assert set(serials) == {nasty_serial, "U2"}
        assert serials[nasty_serial].lot == nasty_lot and serials["U2"].part_number == "VS-505"
        assert store.parts()[0].spec_toml and "[limits" in store.parts()[0].spec_toml  # shipped spec kept


@pytest.mark.parametrize(
    "argv, message",
    [
        (["record", "--bench", "b", "--profile", "50:50:10"], "PORT"),
        (["record", "--sim", "demo", "--bench", "b", "--profile", "50:x:10"], "ON_MS:OFF_MS:CYCLES"),
        (
            [
                "record",
                "--sim",
                "demo",
                "--bench",
                "b",
                "--profile",
                "5:5:5",
                "--units",
                "0=a",
                "0=b",
                "--part",
                "P",
            ],
            "twice",
        ),
        (["record", "--sim", "nope", "--bench", "b", "--profile", "5:5:5"], "preset"),
        (["record", "--sim", "demo", "--resume", "42"], "no run 42"),
    ],
)
def test_bad_options_are_one_line_errors(argv, message, tmp_path, capsys):
    try:
        code = main([*argv, "--db", str(tmp_path / "x.sqlite")])
    except SystemExit as exc:  # the parser's own usage errors
        code = exc.code
    err = capsys.readouterr().err
    assert code != 0 and message in err and err.count("\n") == 1


def test_units_failing_in_the_simulator_are_marked_failed(open_store):
    import dataclasses
    import math

    cfg = demo_config()
    short = {k: dataclasses.replace(p, life_scale=80.0, life_shape=4.0) for k, p in cfg.populations.items()}
    cfg = dataclasses.replace(cfg, populations=short)  # lives of a few dozen cycles
    store = open_store()
    reason, w, rec, sim, counters = record_sim(store, cfg, [0, 1, 2, 3], cycles=1000, timeout_s=90)
    assert reason == "all_failed"
    truth = sim.bench.truth.lives()  # the simulator's ground truth: (life in cycles, failure mode)
    life = store.life_table(part="AG-MS5")
    assert life.failed.all()
    for ru in store.run_units(w.run_id):
        true_life, true_mode = truth[ru.channel]
        assert ru.unit.status == "failed" and ru.unit.failure_mode == true_mode
        if true_mode == "chatter":  # judged against the spec's chatter allowance: later than onset
            assert ru.unit.failed_at_cycle >= math.floor(true_life)
        else:  # a missed make or a weld shows on the very cycle it starts
            assert math.ceil(true_life) <= ru.unit.failed_at_cycle <= math.ceil(true_life) + 1
    assert store.run(w.run_id).end_reason == "all_failed"


def test_record_sim_of_a_preset_that_cycles_at_power_up_stops_at_its_target(tmp_path, capsys):
    # relay-night's sampler starts cycling at power-up; recording it must count only the run's own
    # profile: exactly the target, no ETA below zero, and the actuations said are the ones stored
    db = str(tmp_path / "night.sqlite")
    argv = ["record", "--sim", "relay-night", "--bench", "N", "--profile", "50:50:60", "--sim-speed", "10"]
    assert main([*argv, "--db", db, "--quiet"]) == 0
    said = capsys.readouterr().out
    with Store.open(db, readonly=True) as store:
        (run,) = store.runs()
        stored = len(store.actuations(runs=[run.id]))
        assert run.cycles_done == 60 and run.end_reason == "target"
        assert all(ru.cycles_done == 60 for ru in store.run_units(run.id))
    assert f"60 cycles, {stored:,} actuations" in said
