"""When a unit failed (issue 15): the run time of the failing actuation and the host's wall-clock time of
the batch in which the recorder judged it are stored with the failure, and the first spec break likewise;
the printed summary shows them in the local zone with its UTC offset, the export in UTC with a Z."""

from __future__ import annotations

import dataclasses
import io
import json
import os
from datetime import datetime
from zoneinfo import ZoneInfo

import numpy as np

from benchlog.analysis._types import BREAK, FAIL, MAKE
from tests.recorder._helpers import demo_config, record_sim


def _short_lives():
    cfg = demo_config()
    short = {k: dataclasses.replace(p, life_scale=80.0, life_shape=4.0) for k, p in cfg.populations.items()}
    return dataclasses.replace(cfg, populations=short)  # lives of a few dozen cycles


def _failing(acts: np.ndarray, mode: str) -> np.ndarray:
    """The failing actuation of a failure cycle, by docs/store.md's rule (our own definition)."""
    if mode == "welded":
        return acts[acts["kind"] == BREAK]
    if mode == "missed_make":
        return acts[acts["kind"] == MAKE]
    return acts[acts["chatter"] > 0]


def test_a_failure_keeps_its_run_time_and_wall_clock_time(open_store, tmp_path, children):
    store = open_store()
    reason, w, rec, sim, counters = record_sim(store, _short_lives(), [0, 1, 2, 3], cycles=1000, timeout_s=90)
    assert reason == "all_failed"
    truth = sim.bench.truth.lives()  # the simulator's ground truth: (life in cycles, failure mode)
    run = store.run(w.run_id)
    assert run.started_at is not None and run.ended_at is not None
    failed = store.units()
    assert len(failed) == 4
    for u in failed:
        ch = next(ru.channel for ru in store.run_units(w.run_id) if ru.unit.id == u.id)
        assert u.status == "failed" and u.failure_mode == truth[ch][1]
        acts = store.actuations(units=[u.id], cycles=(u.failed_at_cycle, u.failed_at_cycle))
        failing = _failing(acts, u.failure_mode)
        assert len(failing), (u.failure_mode, acts)
        assert u.run_id == w.run_id
        assert u.failed_at_ns == int(failing["t_start_ns"].min())
        # judged by the recorder during the run: between its start and its end, on the host's clock
        assert u.failed_at is not None and run.started_at <= u.failed_at <= run.ended_at
        # the first actuation judged FAIL against the spec, when there is one
        every = store.actuations(units=[u.id])
        bad = every[every["verdict"] == FAIL]
        if len(bad):
            first = bad[bad["cycle"] == bad["cycle"].min()]
            assert u.first_break_cycle == int(first["cycle"][0])
            assert u.first_break_ns == int(first["t_start_ns"].min())
            assert u.first_break_run_id == w.run_id
            assert run.started_at <= u.first_break_at <= run.ended_at
        else:
            assert u.first_break_cycle is None and u.first_break_at is None

    # the export keeps UTC, ISO 8601 with a Z, and the run time in ns
    from benchlog.views.export import write_units

    out = io.StringIO()
    assert write_units(store, out, as_json=True) == 4
    exported = {r["unit_id"]: r for r in json.loads(out.getvalue())["units"]}
    for u in failed:
        r = exported[u.id]
        assert r["failed_at_utc"].endswith("Z")
        assert datetime.fromisoformat(r["failed_at_utc"]) == u.failed_at
        assert r["failed_at_run_ns"] == u.failed_at_ns and r["failed_at_cycle"] == u.failed_at_cycle
    out = io.StringIO()
    write_units(store, out)
    header, *rows = out.getvalue().splitlines()
    col = header.split(",").index("failed_at_utc")
    assert len(rows) == 4 and all(row.split(",")[col].endswith("Z") for row in rows)

    # the printed summary (dash without a terminal) shows the local time with its offset
    url = store.engine.url.render_as_string(hide_password=False)
    zone = "America/Chicago"
    env = {k: v for k, v in os.environ.items() if k != "BENCHLOG_DEBUG"} | {"TZ": zone}
    code, text, err = children.benchlog("dash", "--db", url, env=env).finish()
    assert code == 0, err
    for u in failed:
        local = u.failed_at.astimezone(ZoneInfo(zone))
        off = local.strftime("%z")  # -0600 or -0500 (IANA tz database)
        want = f"{local:%Y-%m-%d %H:%M:%S} {off[:3]}:{off[3:]}, run {w.run_id} at "
        assert f"failed at cycle {u.failed_at_cycle:,}: {want}" in text, text
