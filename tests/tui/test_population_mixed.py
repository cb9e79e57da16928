"""Populations of mixed parts (issue 15): a 1 ms relay beside a 3 ms switch are put on one scale as a
percentage of each part's own limit, and the screen says so; a single part keeps its milliseconds."""

from __future__ import annotations

from textual.widgets import DataTable

from benchlog.store import END_TARGET, Store
from benchlog.views.tui import BenchDashboard
from benchlog.views.tui._data import Group, value_text
from benchlog.views.tui._population import PopulationScreen
from benchlog.views.tui._runs import RunsScreen

from ._build import SPEC, actuations
from ._pilot import column, settle
from .test_dashboard import static_text

LIMITS_MS = {"RLY-1": 1.0, "SW-3": 3.0}


def _store(path: str) -> dict[str, int]:
    store = Store.open(path)
    units = {}
    for number, limit in LIMITS_MS.items():
        spec = SPEC.format(number=number, supplier="Supplier").replace("max_ms = 3.0", f"max_ms = {limit}", 1)
        part = store.register_part(number, "Supplier", spec_toml=spec)
        lot = store.register_lot(part, "L1")
        for i in range(2):
            units[len(units)] = store.register_unit(lot, f"{number}-{i}")
    bench = store.register_bench("bench-1", channels=8)
    w = store.start_run(bench, units, profile={"on_ms": 50, "off_ms": 50}, target_cycles=600)
    w.add(actuations=actuations(range(4), 0, 599, seed=5))
    w.close(END_TARGET)
    parts = {p.part_number: p.id for p in store.parts()}
    store.close()
    return parts


async def test_mixed_limits_are_shown_as_a_percentage_of_each_parts_limit(tmp_path):
    path = str(tmp_path / "mixed.sqlite")
    parts = _store(path)
    app = BenchDashboard(path, refresh_s=0, show_timing=False)
    async with app.run_test(size=(100, 30)) as pilot:
        await settle(pilot, RunsScreen)
        await app.push_screen(PopulationScreen(Group("all", 0, "parts")))
        pop = await settle(pilot, PopulationScreen)
        data = pop.last_data
        assert "% of each part's limit" in static_text(pop, "#pop-title")
        assert "% of limit" in static_text(pop, "#pop-key")
        t = pop.query_one("#pop-units", DataTable)
        serials = column(t, "unit")
        limit_cols = set()
        for pu in data.units:
            limit_us = LIMITS_MS[pu.unit.part_number] * 1000
            f = pu.figures["make_bounce"]
            row = serials.index(pu.unit.serial)
            # each figure over its own part's limit, in per cent
            assert column(t, "p95")[row] == f"{f.p95 / limit_us * 100:.0f}%"
            assert column(t, "max")[row] == f"{f.max / limit_us * 100:.0f}%"
            limit_cols.add(column(t, "strip")[row].index("|"))
        assert len(limit_cols) == 1  # every part's limit at one place on the scale: 100 %
        assert {pu.unit.part_number for pu in data.units} == set(LIMITS_MS)

        # one part: its own units, milliseconds
        pop.group = Group("part", parts["RLY-1"], "RLY-1")
        pop.request()
        pop = await settle(pilot, PopulationScreen)
        await pilot.pause()
        assert "(ms)" in static_text(pop, "#pop-title")
        t = pop.query_one("#pop-units", DataTable)
        serials = column(t, "unit")
        for pu in pop.last_data.units:
            row = serials.index(pu.unit.serial)
            assert column(t, "p95")[row] == value_text(pu.figures["make_bounce"].p95)
