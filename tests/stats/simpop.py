"""Draw actuations and life tables from benchlog.sim's own unit model (its demo preset's populations,
with their known true parameters), without the serial path: the statistics are under test here."""

from __future__ import annotations

import numpy as np

from benchlog.analysis import empty_actuations
from benchlog.sim import load_preset
from benchlog.sim._physics import cycles, draw_unit
from benchlog.stats import LifeTable, Population

ON_NS = OFF_NS = 50_000_000


def demo_population(name: str):
    return load_preset("demo").populations[name]


def draw(pop_name: str, units: int, cycles_per_unit: int, test_end: float, seed: int) -> Population:
    """`units` units each recorded for up to `cycles_per_unit` cycles (fewer when it fails first), life
    test to `test_end` cycles (units alive then are suspensions)."""
    rng = np.random.default_rng(seed)
    pop = demo_population(pop_name)
    rows, unit_ids, life_rows = [], [], []
    for i in range(units):
        serial = f"{pop_name}-S{seed}-{i:03d}"
        u = draw_unit(rng, i % 16, serial, pop)
        n = int(max(1, min(cycles_per_unit, np.floor(u.life))))
        _, truth = cycles(rng, u, 0, ON_NS, OFF_NS, n, 24, 2.0)
        a = empty_actuations(len(truth))
        for col in ("channel", "cycle", "kind", "transit_us", "bounce_us", "bounce_count", "chatter"):
            a[col] = truth[col]
        a["drive_level"] = np.where(truth["kind"] == 0, 1, 0)  # normally open: drive on -> make
        rows.append(a)
        unit_ids.append(np.full(len(a), serial, dtype=object))
        failed = u.life <= test_end
        life_rows.append((serial, min(u.life, test_end), failed, u.mode if failed else ""))
    act = np.concatenate(rows)
    return Population.from_actuations(pop_name, act, np.concatenate(unit_ids), LifeTable.of(life_rows))
