"""Synthetic stores for the dashboard tests (invented numbers; the tests check the screens against
the store they read and against numpy, never against these values as a reference)."""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np
from sqlalchemy import create_engine, text

from benchlog.analysis import BREAK, MAKE, empty_actuations
from benchlog.events import Incident
from benchlog.store import END_TARGET, Store

SPEC = """
[part]
number = "{number}"
supplier = "{supplier}"

[verdict]
marginal_band = 0.10

[limits.make_bounce]
max_ms = 3.0
percentile = 95

[limits.break_bounce]
max_ms = 8.0
percentile = 95

[limits.operate_time]
max_ms = 12.0
percentile = 100
"""

PERIOD_NS = 100_000_000


def actuations(channels, first: int, last: int, *, seed: int, growth: dict[int, float] | None = None):
    """One make and one break per cycle and channel; `growth[ch]` multiplies bounce by
    (1 + growth * cycle / 1000) to make a unit drift."""
    rng = np.random.default_rng(seed)
    chans = np.asarray(list(channels), np.uint8)
    cyc = np.arange(first, last + 1, dtype=np.int64)
    n = len(chans) * len(cyc) * 2
    a = empty_actuations(n)
    a["channel"] = np.repeat(chans, len(cyc) * 2)
    a["cycle"] = np.tile(np.repeat(cyc, 2), len(chans))
    a["kind"] = np.tile([MAKE, BREAK], len(chans) * len(cyc))
    a["drive_level"] = np.where(a["kind"] == MAKE, 1, 0)
    a["t_start_ns"] = a["cycle"] * PERIOD_NS + (a["kind"] == BREAK) * (PERIOD_NS // 2)
    a["t_first_ns"] = a["t_start_ns"] + 5_000_000
    a["t_settle_ns"] = a["t_first_ns"] + 1_000_000
    a["t_end_ns"] = a["t_start_ns"] + PERIOD_NS // 2
    a["transit_us"] = np.where(a["kind"] == MAKE, rng.uniform(5000, 7000, n), rng.uniform(3000, 4000, n))
    bounce = np.where(a["kind"] == MAKE, rng.gamma(2.0, 400.0, n), rng.gamma(2.0, 900.0, n))
    for ch, g in (growth or {}).items():
        sel = a["channel"] == ch
        bounce[sel] *= 1.0 + g * a["cycle"][sel] / 1000.0
    a["bounce_us"] = bounce
    a["bounce_count"] = rng.integers(0, 6, n)
    a["longest_gap_us"] = bounce / 4
    a["wrong_state_us"] = bounce / 3
    a["chatter"] = (rng.random(n) < 0.002).astype(np.int32)
    a["transfer_us"] = np.nan
    return a


def register(store: Store, number: str, supplier: str, lot: str, serials: list[str]) -> list[int]:
    part = store.register_part(number, supplier, spec_toml=SPEC.format(number=number, supplier=supplier))
    lot_id = store.register_lot(part, lot)
    return [store.register_unit(lot_id, s) for s in serials]


def build(path: str, *, cycles: int = 2000, close: bool = True) -> dict:
    """Two parts of four units each on bench-1 (one unit drifts, one fails, one link outage), and a
    short ended run on bench-2. Returns the ids."""
    store = Store.open(path)
    a_units = register(store, "PART-A", "Supplier A", "A1", [f"A1-{i:03d}" for i in range(1, 5)])
    b_units = register(store, "PART-B", "Supplier B", "B1", [f"B1-{i:03d}" for i in range(1, 5)])
    b1 = store.register_bench("bench-1", channels=8)
    b2 = store.register_bench("bench-2", channels=8)
    units = dict(enumerate(a_units + b_units))
    w = store.start_run(b1, units, profile={"on_ms": 50, "off_ms": 50}, target_cycles=10_000, note="test run")
    fail_ch, fail_at = 6, cycles * 3 // 4
    for lo in range(0, cycles, 500):
        hi = min(cycles, lo + 500) - 1
        acts = actuations(range(8), lo, hi, seed=lo, growth={2: 1.5})
        acts = acts[~((acts["channel"] == fail_ch) & (acts["cycle"] >= fail_at))]
        incidents = []
        if lo == 500:
            host = 10**12  # a 12.5 s outage in host time
            incidents.append(Incident("disconnect", 60 * 10**9, 72 * 10**9, host, host + 12_500_000_000, 40))
            incidents.append(Incident("decode_fault", 50 * 10**9, 50 * 10**9, 10**12, 10**12, None))
        if lo <= fail_at <= hi:
            w.mark_failed(units[fail_ch], fail_at, "missed_make")
        if lo == 1000:  # the drifting unit's first drift flag, as a recorder would have raised it
            w.mark_drift(units[2], "make_bounce", MAKE, 899, at=datetime(2026, 3, 2, 0, 12, 5, tzinfo=UTC))
        w.add(actuations=acts, incidents=incidents)
        w.flush()
    run1 = w.run_id
    if close:
        w.close(END_TARGET)
    w2 = store.start_run(b2, {0: a_units[0]}, profile={"on_ms": 50, "off_ms": 50}, target_cycles=300)
    w2.add(actuations=actuations([0], 0, 299, seed=99))
    w2.close(END_TARGET)
    store.close()
    return {"run1": run1, "run2": w2.run_id, "units": units, "a": a_units, "b": b_units}


def freeze_times(path: str) -> None:
    """Fixed start, end and heartbeat times and rates, so screenshots do not depend on the clock."""
    eng = create_engine(f"sqlite:///{path}")
    t0 = datetime(2026, 3, 1, 21, 0, tzinfo=UTC).replace(tzinfo=None)
    t1 = datetime(2026, 3, 2, 6, 30, tzinfo=UTC).replace(tzinfo=None)
    with eng.begin() as c:
        sql = "UPDATE runs SET started_at=:a, heartbeat_at=:b, ended_at=:b, rate_cps=9.5"
        c.execute(text(sql), {"a": t0, "b": t1})
    eng.dispose()
