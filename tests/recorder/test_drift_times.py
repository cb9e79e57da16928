"""When the recorder first flagged a unit's drift (issue 15): the metric, the life cycle of the window that
raised the flag, the run time of that window's last actuation and the host's wall-clock time are stored
with the unit; the flag is the dashboard's own, judged window by window as the recording goes."""

from __future__ import annotations

import dataclasses
import io
import json
from datetime import datetime

from benchlog.analysis import DRIFT_METRICS
from benchlog.sim import load_preset
from benchlog.store import Trend
from benchlog.views.cli.cmd_demo import aged
from benchlog.views.tui._data import drift_of, part_spec
from tests.recorder._helpers import record_sim

CYCLES = 600  # 30 windows of 20 cycles (tests/recorder/_helpers.start_run)


def _prefix(t: Trend, last_cycle: int) -> Trend:
    keep = t.cycle_hi <= last_cycle
    arrays = {f.name: getattr(t, f.name)[keep] for f in dataclasses.fields(Trend)[3:]}
    return dataclasses.replace(t, **arrays)


def _first_dashboard_flag(store, unit, spec) -> tuple[int, str] | None:
    """The earliest window end at which the dashboard's own judgement (tui drift_of, over the stored
    trend as it stood then) flags the unit: (cycle, metric), make before break at the same cycle."""
    found = []
    for metric, (column, kind) in DRIFT_METRICS.items():
        t = store.trend(unit.id, column, kind=kind)
        for end in t.cycle_hi[t.count > 0].tolist():
            flag, _ = drift_of(_prefix(t, end), metric, spec)
            if flag is not None and flag.signalled:
                found.append((end, kind, metric))
                break
    return min(found)[::2] if found else None


def test_the_first_drift_flag_keeps_its_cycle_run_time_and_wall_clock(open_store):
    store = open_store()
    # the demo's parts aged as `benchlog demo` ages them for a short run: several wear toward their limits
    cfg = aged(load_preset("demo"), CYCLES)
    reason, w, rec, sim, counters = record_sim(store, cfg, [0, 1, 2, 3], CYCLES, speed=200)
    assert reason in ("target", "all_failed")
    run = store.run(w.run_id)
    spec = part_spec(next(p for p in store.parts() if p.part_number == "AG-MS5"))
    flagged = 0
    for u in store.units():
        if u.status != "alive":
            continue  # judged while alive only; a failed unit's later windows are not its life
        first = _first_dashboard_flag(store, u, spec)
        if first is None:
            assert u.first_drift_cycle is None, u
            continue
        flagged += 1
        # the recorder raised it at the very window the dashboard would first have shown it
        assert (u.first_drift_cycle, u.first_drift_metric) == first, u
        assert u.first_drift_run_id == w.run_id
        # the run time of that window's last actuation of the metric's kind
        kind = DRIFT_METRICS[u.first_drift_metric][1]
        acts = store.actuations(units=[u.id], kind=kind, cycles=(u.first_drift_cycle, u.first_drift_cycle))
        assert u.first_drift_ns == int(acts["t_start_ns"].min())
        # judged during the run, on the host's clock
        assert run.started_at <= u.first_drift_at <= run.ended_at
    assert flagged >= 1
    assert {f.unit_id for f in rec.drift_flags} == {u.id for u in store.units() if u.first_drift_cycle}

    # the export keeps UTC with a Z, and the run time in ns
    from benchlog.views.export import write_units

    out = io.StringIO()
    write_units(store, out, as_json=True)
    for r in json.loads(out.getvalue())["units"]:
        u = next(x for x in store.units() if x.id == r["unit_id"])
        assert (
            r["first_drift_cycle"] == u.first_drift_cycle and r["first_drift_metric"] == u.first_drift_metric
        )
        assert r["first_drift_run_ns"] == u.first_drift_ns
        if u.first_drift_at is None:
            assert r["first_drift_utc"] is None
        else:
            assert r["first_drift_utc"].endswith("Z")
            assert datetime.fromisoformat(r["first_drift_utc"]) == u.first_drift_at
