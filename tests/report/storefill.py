"""Fill a real SQLite store with the simulator's demo populations (invented data, benchlog.sim's unit
model), recording every `step`-th cycle of a long life test so the file stays small."""

from __future__ import annotations

from importlib import resources

import numpy as np

from benchlog.analysis import empty_actuations
from benchlog.events import DISCONNECT, Incident
from benchlog.sim import load_preset
from benchlog.sim._physics import cycles, draw_unit
from benchlog.store import END_TARGET, Store

ON_NS = OFF_NS = 50_000_000


def fill(
    path,
    *,
    units_per_lot: int = 8,
    recorded: int = 400,
    test_end: int = 300_000,
    seed: int = 1,
    lots=(("AG-MS5", "L1"), ("VS-505", "L1")),
    names=None,
) -> str:
    """Write one run with `units_per_lot` units of each lot (at most 16 channels in all)."""
    cfg = load_preset("demo")
    rng = np.random.default_rng(seed)
    store = Store.open(str(path))
    bench = store.register_bench("bench-A", board_id="BW-BENCH-A", clock_hz=1_000_000, channels=16)
    channel_units, plan = {}, []
    ch = 0
    for part, code in lots:
        pop = cfg.populations[part]
        spec = resources.files("benchlog.presets").joinpath("specs", f"{part}.toml").read_text("utf-8")
        part_id = store.register_part(part, pop.supplier, spec_toml=spec)
        lot_id = store.register_lot(part_id, code)
        for i in range(units_per_lot):
            serial = (names or {}).get((part, i), f"{part}-{code}-{i + 1:03d}")
            uid = store.register_unit(lot_id, serial)
            channel_units[ch] = uid
            plan.append((ch, uid, draw_unit(rng, ch, serial, pop)))
            ch += 1
    writer = store.start_run(
        bench, channel_units, profile={"on_ms": 50, "off_ms": 50}, target_cycles=test_end
    )
    step = test_end // recorded
    for _ch, uid, unit in plan:
        last = min(unit.life, test_end)
        n = max(1, int(last // step))
        _, truth = cycles(rng, unit, 0, ON_NS, OFF_NS, n, 24, 2.0)
        a = empty_actuations(len(truth))
        for col in ("channel", "kind", "transit_us", "bounce_us", "bounce_count", "chatter"):
            a[col] = truth[col]
        a["cycle"] = truth["cycle"] * step
        a["drive_level"] = np.where(truth["kind"] == 0, 1, 0)
        a["t_start_ns"] = a["cycle"] * (ON_NS + OFF_NS) + np.where(truth["kind"] == 0, 0, ON_NS)
        writer.add(actuations=a)
        if unit.life <= test_end:
            writer.mark_failed(uid, int(unit.life), unit.mode)
    writer.add(
        incidents=[
            Incident(DISCONNECT, 10**12, 10**12 + 4 * 10**9, 0, 4 * 10**9, 120, None, "port vanished for 4 s")
        ]
    )
    writer.flush(final=True)
    writer.close(END_TARGET)
    store.close()
    return str(path)
