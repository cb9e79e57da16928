"""`record --on-event CMD`: the user's command is told of each event, as a real child process, and a slow,
failing or missing command never stalls the recording (its failures are incidents of the run)."""

from __future__ import annotations

import json
import os
import shlex
import sys
from pathlib import Path

import numpy as np
import pytest

from benchlog.analysis import FAIL
from benchlog.events import DISCONNECT, EVENT_COMMAND
from benchlog.store import Store
from benchlog.views.cli import main
from tests.conftest import wait_until

# the command the tests give --on-event: it keeps what it was told (standard input and BENCHLOG_*
# variables) in a file per call, then exits 0, exits 3, or hangs with a grandchild in its group
HOOK = """\
import json, os, subprocess, sys, time
out, how = sys.argv[1], sys.argv[2]
told = json.loads(sys.stdin.read())
env = {k: v for k, v in os.environ.items() if k.startswith("BENCHLOG_")}
name = f"{told['event']}-{told.get('channel', 'x')}-{os.getpid()}"
with open(os.path.join(out, name + ".tmp"), "w") as f:
    json.dump({"stdin": told, "env": env}, f)
os.rename(os.path.join(out, name + ".tmp"), os.path.join(out, name + ".json"))
if how == "fail":
    sys.exit(3)
if how == "hang":
    grandchild = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(100000)"])
    with open(os.path.join(out, f"pids-{os.getpid()}"), "w") as f:
        f.write(f"{os.getpid()} {grandchild.pid}")
    time.sleep(100000)
"""

SAMPLER = """\
[sampler]
board_id = "EVENTS-TEST"
clock_hz = 1000000
counter_bits = 32
ppm = 0.0
channels = 2
form = "line"

[populations.AG-MS5]
supplier = "Ashgrove Components"
operate = { median_us = 6200.0, sigma = 0.10 }
release = { median_us = 3800.0, sigma = 0.12 }
make = { count_mean = 3.0, first_gap_us = 320.0, dwell_us = 170.0, decay = 0.55, jitter = 0.35 }
break = { count_mean = 2.0, first_gap_us = 850.0, dwell_us = 380.0, decay = 0.60, jitter = 0.40 }
wear_per_100k = 0.6
life_shape = LIFE_SHAPE
life_scale = LIFE_SCALE
failure = { welded = 0.15, missed_make = 0.35, chatter = 0.50 }
chatter_rate_hz = 25.0
chatter_open = { median_us = 90.0, sigma = 0.5 }

[[units]]
channel = 0
population = "AG-MS5"
serial = "EV-001"

[[units]]
channel = 1
population = "AG-MS5"
serial = "EV-002"
"""


def _sampler(tmp_path: Path, *, short_lives: bool) -> str:
    shape, scale = ("4.0", "80.0") if short_lives else ("2.4", "420000.0")  # lives of ~80 cycles, or none
    path = tmp_path / ("short.toml" if short_lives else "long.toml")
    path.write_text(SAMPLER.replace("LIFE_SHAPE", shape).replace("LIFE_SCALE", scale))
    return str(path)


def _hook(tmp_path: Path, how: str) -> tuple[str, Path]:
    out = tmp_path / f"told-{how}"
    out.mkdir()
    script = tmp_path / "hook.py"
    script.write_text(HOOK)
    return f"'{sys.executable}' '{script}' '{out}' {how}", out


def _told(out: Path) -> list[dict]:
    return [json.loads(p.read_text()) for p in sorted(out.glob("*.json"))]


def _record(sampler: str, db: str, *more: str) -> list[str]:
    return ["record", "--sim", sampler, "--sim-speed", "20", "--bench", "EV", "--db", db, "--quiet", *more]


def test_each_failure_and_the_end_are_told_with_the_stored_facts(tmp_path, capsys):
    db = str(tmp_path / "ev.sqlite")
    cmd, out = _hook(tmp_path, "ok")
    argv = _record(_sampler(tmp_path, short_lives=True), db, "--profile", "50:50:1000", "--on-event", cmd)
    assert main(argv) == 0
    assert "ended (all_failed)" in capsys.readouterr().out
    told = _told(out)
    with Store.open(db, readonly=True) as store:
        (run,) = store.runs()
        units = {ru.channel: ru.unit for ru in store.run_units(run.id)}
        acts = store.actuations(runs=[run.id])
        assert store.incidents(run.id, kind=EVENT_COMMAND) == []  # every call went well
    for t in told:  # what came on standard input came in the variables too
        for k, v in t["stdin"].items():
            assert t["env"]["BENCHLOG_" + k.upper()] == str(v)
        assert t["stdin"]["run"] == run.id and t["stdin"]["bench"] == "EV"
    failed = {t["stdin"]["channel"]: t["stdin"] for t in told if t["stdin"]["event"] == "unit_failed"}
    assert set(failed) == {0, 1}  # both units failed, each told once
    for ch, ev in failed.items():
        u = units[ch]
        assert u.status == "failed"
        assert (ev["unit"], ev["unit_id"], ev["part"], ev["lot"]) == (u.serial, u.id, u.part_number, u.lot)
        assert ev["cycle"] == u.failed_at_cycle and ev["mode"] == u.failure_mode
    broken = {t["stdin"]["channel"]: t["stdin"] for t in told if t["stdin"]["event"] == "spec_broken"}
    for ch, u in units.items():  # the first actuation out of spec, as stored
        bad = acts[(acts["unit_id"] == u.id) & (acts["verdict"] == FAIL)]
        if len(bad):
            assert broken[ch]["cycle"] == int(np.min(bad["cycle"])), ch
        else:
            assert ch not in broken
    (ended,) = [t["stdin"] for t in told if t["stdin"]["event"] == "run_ended"]
    assert ended["reason"] == run.end_reason == "all_failed"
    assert ended["cycles"] == run.cycles_done and (ended["units"], ended["failed"]) == (2, 2)
    assert len(told) == len(failed) + len(broken) + 1  # nothing else, nothing twice


def test_a_hanging_command_is_killed_with_what_it_started_and_the_run_still_ends(tmp_path, children):
    db = str(tmp_path / "hang.sqlite")
    cmd, out = _hook(tmp_path, "hang")
    sampler = _sampler(tmp_path, short_lives=False)
    argv = _record(sampler, db, "--profile", "50:50:60", "--on-event", cmd, "--event-timeout-s", "1")
    rc, said, err = children.benchlog(*argv).finish()
    assert rc == 0 and "ended (target)" in said, err
    assert err.count("--on-event command failed") == 1 and "timed out" in err  # said once
    with Store.open(db, readonly=True) as store:
        (run,) = store.runs()
        assert run.end_reason == "target" and run.cycles_done == 60
        incs = store.incidents(run.id, kind=EVENT_COMMAND)
    assert incs and all("timed out" in i.detail for i in incs)
    assert any(i.detail.startswith("run_ended:") for i in incs)  # the last event, killed at the end
    pids = [int(p) for f in out.glob("pids-*") for p in f.read_text().split()]
    assert len(pids) == 2 * len(incs)  # each call hung with a grandchild

    def gone(pid: int) -> bool:  # ended: no such process, or a zombie waiting for init to reap it
        try:
            return Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0] == "Z"
        except (FileNotFoundError, ProcessLookupError):
            return True

    for pid in pids:  # record has ended: the calls and what they started were killed with it
        wait_until(lambda pid=pid: gone(pid), f"process {pid} of the hanging command to end")


def test_a_failing_command_is_an_incident_and_said_once(tmp_path, capsys):
    db = str(tmp_path / "fail.sqlite")
    cmd, out = _hook(tmp_path, "fail")
    argv = _record(_sampler(tmp_path, short_lives=True), db, "--profile", "50:50:1000", "--on-event", cmd)
    assert main(argv) == 0
    err = capsys.readouterr().err
    assert err.count("--on-event command failed") == 1 and "exit status 3" in err
    with Store.open(db, readonly=True) as store:
        (run,) = store.runs()
        incs = store.incidents(run.id, kind=EVENT_COMMAND)
    told = _told(out)
    assert len(incs) == len(told) >= 3  # two failures and the end, at least: each call an incident
    assert all(i.detail.endswith("exit status 3") for i in incs)
    assert sorted(i.detail.split(":")[0] for i in incs) == sorted(t["stdin"]["event"] for t in told)
    failed = {i.channel for i in incs if i.detail.startswith("unit_failed:")}
    assert failed == {0, 1}


def test_a_lost_link_is_told_once_down_long_enough(tmp_path):
    db = str(tmp_path / "link.sqlite")
    cmd, out = _hook(tmp_path, "ok")
    sampler = _sampler(tmp_path, short_lives=False)
    argv = _record(sampler, db, "--profile", "50:50:400", "--on-event", cmd, "--event-after-s", "0.2")
    argv += ["--sim-pull-at", "10", "--sim-pull-for", "1.0"]  # 10 s of sampler time in, 1 s of wall time out
    assert main(argv) == 0
    with Store.open(db, readonly=True) as store:
        (run,) = store.runs()
        (outage,) = store.incidents(run.id, kind=DISCONNECT)
    (lost,) = [t["stdin"] for t in _told(out) if t["stdin"]["event"] == "link_lost"]
    assert 0.2 <= lost["down_s"] <= outage.duration_s and "channel" not in lost


@pytest.mark.parametrize(
    "more, said",
    [
        (["--on-event", ""], "needs a command"),
        (["--on-event", "no-such-command-benchlog-x"], "no command"),
        (["--on-event", "/nonexistent/hook"], "not an executable"),
        (["--on-event", "echo 'unclosed"], "cannot split"),
        (["--on-event", "true", "--event-timeout-s", "0"], "--event-timeout-s"),
        (["--on-event", "true", "--event-after-s", "-1"], "--event-after-s"),
    ],
)
def test_impossible_event_options_are_usage_errors(more, said, tmp_path, capsys):
    argv = ["record", "--sim", "demo", "--bench", "B", "--profile", "50:50:10", *more]
    assert main([*argv, "--db", str(tmp_path / "x.sqlite")]) == 64
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and said in err and "Traceback" not in err
    assert not os.path.exists(tmp_path / "x.sqlite")  # nothing started


def test_a_store_error_is_told_as_the_end_of_the_run(tmp_path):
    from sqlalchemy import event

    from benchlog.errors import StoreError
    from benchlog.recorder import EventCommand
    from tests.recorder._helpers import demo_config, record_sim

    cmd, out = _hook(tmp_path, "ok")
    store = Store.open(str(tmp_path / "full.sqlite"))
    pages = store.engine.connect().exec_driver_sql("PRAGMA page_count").scalar() + 40

    # SQLite's max_page_count caps the file: past it every write fails as on a full disk (SQLITE_FULL)
    @event.listens_for(store.engine, "connect")
    def _cap(dbapi_connection, _record):
        dbapi_connection.execute(f"PRAGMA max_page_count={pages}")

    store.engine.dispose()
    told = EventCommand(shlex.split(cmd), timeout_s=10)
    try:
        with pytest.raises(StoreError, match="disk is full"):
            record_sim(store, demo_config(), [0, 1, 2, 3], cycles=2000, events=told)
    finally:
        told.close(0.0)
        store.close()
    (ended,) = [t["stdin"] for t in _told(out) if t["stdin"]["event"] == "run_ended"]
    assert ended["reason"] == "store_error" and "disk is full" in ended["detail"]


# a second part whose contacts wear fast: at 500 per 100,000 cycles their bounce count and lengths double
# in 200 cycles (docs/simulator.md), so a short run shows the unit drifting while the other stays steady
WEARING = """
[populations.VS-505]
supplier = "Vellmar Switchgear"
operate = { median_us = 6900.0, sigma = 0.10 }
release = { median_us = 3500.0, sigma = 0.10 }
make = { count_mean = 3.0, first_gap_us = 380.0, dwell_us = 160.0, decay = 0.58, jitter = 0.30 }
break = { count_mean = 2.0, first_gap_us = 1000.0, dwell_us = 350.0, decay = 0.62, jitter = 0.30 }
wear_per_100k = WEAR
life_shape = 2.4
life_scale = 420000.0
failure = { welded = 1.0 }
"""


def test_a_unit_starting_to_drift_is_told_once_with_the_stored_flag(tmp_path):
    db = str(tmp_path / "drift.sqlite")
    cmd, out = _hook(tmp_path, "ok")
    text = SAMPLER.replace("LIFE_SHAPE", "2.4").replace("LIFE_SCALE", "420000.0")  # no unit fails
    text = text.replace(
        'population = "AG-MS5"\nserial = "EV-002"', 'population = "VS-505"\nserial = "EV-002"'
    )
    sampler = tmp_path / "wearing.toml"
    sampler.write_text(text + WEARING.replace("WEAR", "500.0"))
    argv = _record(str(sampler), db, "--profile", "50:50:400", "--window", "20", "--sim-seed", "7")
    assert main([*argv, "--on-event", cmd]) == 0
    with Store.open(db, readonly=True) as store:
        (run,) = store.runs()
        units = {ru.channel: ru.unit for ru in store.run_units(run.id)}
    told = [t for t in _told(out) if t["stdin"]["event"] == "drift_flagged"]
    flagged = {ch: u for ch, u in units.items() if u.first_drift_cycle is not None}
    assert 1 in flagged  # the wearing unit drifts
    assert sorted(t["stdin"]["channel"] for t in told) == sorted(flagged)  # each flag told, once
    for t in told:
        ev, u = t["stdin"], flagged[t["stdin"]["channel"]]
        assert (ev["unit"], ev["unit_id"], ev["part"], ev["lot"]) == (u.serial, u.id, u.part_number, u.lot)
        assert (ev["cycle"], ev["metric"]) == (u.first_drift_cycle, u.first_drift_metric)
        assert ev["run"] == run.id and ev["bench"] == "EV"
        for k, v in ev.items():  # the same facts in the command's environment
            assert t["env"]["BENCHLOG_" + k.upper()] == str(v)
