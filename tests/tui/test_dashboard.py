"""The dashboard as a real Textual app under run_test(), on real SQLite store files.

Reference for the figures: numpy.percentile (linear interpolation, the definition the store's rollups
document) over the raw actuations read back from the same store.
"""

from __future__ import annotations

import math
import os
import threading

import numpy as np
import pytest
from textual.geometry import Region
from textual.widgets import DataTable, Static

from benchlog.analysis import BREAK, INCOMPLETE, MAKE
from benchlog.store import Store
from benchlog.views.tui import BenchDashboard
from benchlog.views.tui._data import cycles_text, duration_text, value_text
from benchlog.views.tui._history import HistoryScreen
from benchlog.views.tui._population import PopulationScreen
from benchlog.views.tui._runs import RunsScreen
from benchlog.views.tui._units import UnitsScreen

from ._build import actuations, build
from ._pilot import cell_text, column, settle, until

SIZE = (100, 30)
WIDE = (130, 30)  # the units' full table fits (below it turns compact: tests/tui/test_small_terminal.py)


def rolling_p95_max(store: Store, unit_id: int, kind: int, window: int = 100, windows: int = 10):
    """Worst per-window p95 and the max over the last `windows` windows, from the raw actuations."""
    acts = store.actuations(units=[unit_id], kind=kind)
    acts = acts[(acts["flags"] & INCOMPLETE) == 0]
    win = acts["cycle"] // window
    last = np.unique(win)[-windows:]
    p95 = max(float(np.percentile(acts["bounce_us"][win == w], 95)) for w in last)
    mx = float(acts["bounce_us"][np.isin(win, last)].max())
    return p95, mx


def static_text(screen, selector: str) -> str:
    """The text a widget shows on screen, line by line."""
    w = screen.query_one(selector, Static)
    lines = w.render_lines(Region(0, 0, w.size.width, w.size.height))
    return "\n".join(line.text.rstrip() for line in lines)


def flat(text: str) -> str:
    return " ".join(text.split())


async def open_run(pilot, run_id: int) -> UnitsScreen:
    runs = await settle(pilot, RunsScreen)
    table = runs.query_one("#runs", DataTable)
    row = column(table, "run").index(str(run_id))
    table.move_cursor(row=row)
    await pilot.press("enter")
    return await settle(pilot, UnitsScreen)


async def test_runs_list_matches_the_store(built):
    path, ids = built
    with Store.open(path, readonly=True) as store:
        runs = store.runs()
        outage = store.incidents(ids["run1"], kind="disconnect")
    app = BenchDashboard(path, refresh_s=0)
    async with app.run_test(size=SIZE) as pilot:
        scr = await settle(pilot, RunsScreen)
        t = scr.query_one("#runs", DataTable)
        assert column(t, "run") == [str(r.id) for r in runs]
        row = column(t, "run").index(str(ids["run1"]))
        r1 = next(r for r in runs if r.id == ids["run1"])
        assert cell_text(t, row, "cycles") == f"{cycles_text(r1.cycles_done)}/{cycles_text(r1.target_cycles)}"
        assert cell_text(t, row, "inc") == str(r1.incidents) == "2"
        assert cell_text(t, row, "link") == f"DOWN {duration_text(outage[0].duration_s)}"
        assert cell_text(t, row, "units") == f"{r1.units} {r1.units_failed} fail"
        assert cell_text(t, row, "state") == "ENDED"


async def test_navigate_filter_sort_history_and_back(built):
    path, ids = built
    store = Store.open(path, readonly=True)
    app = BenchDashboard(path, refresh_s=0)
    async with app.run_test(size=WIDE) as pilot:  # the units' full table (p95/max pairs)
        units = await open_run(pilot, ids["run1"])
        t = units.query_one("#units", DataTable)
        assert t.row_count == 8
        serials = column(t, "unit")
        # the drifting unit (channel 2): figures agree with numpy over the raw actuations
        drifter = ids["units"][2]
        row = serials.index(store.units(ids=[drifter])[0].serial)
        p95, mx = rolling_p95_max(store, drifter, MAKE)
        assert cell_text(t, row, "make") == f"{value_text(p95)}/{value_text(mx)}"
        p95b, mxb = rolling_p95_max(store, drifter, BREAK)
        assert cell_text(t, row, "break") == f"{value_text(p95b)}/{value_text(mxb)}"
        assert cell_text(t, row, "verdict") == "FAIL"  # p95 above the 3 ms make bounce limit
        assert cell_text(t, row, "drift").startswith("DRIFT")
        # the failed unit
        failed = store.units(ids=[ids["units"][6]])[0]
        frow = serials.index(failed.serial)
        assert cell_text(t, frow, "life") == f"FAILED {cycles_text(failed.failed_at_cycle)} missed"
        # sort by verdict: FAIL first
        await pilot.press("s", "s")
        assert units.sort_key == "drift"
        assert cell_text(t, 0, "drift").startswith("DRIFT")
        await pilot.press("s")
        await pilot.press("s")  # cycles, then make bounce
        assert units.sort_key == "make bounce"
        makes = [float(cell_text(t, r, "make").split("/")[0]) for r in range(t.row_count)]
        assert makes == sorted(makes, reverse=True)
        # verdict filter: FAIL only, then MARGINAL, PASS, all
        await pilot.press("v")
        assert set(column(t, "verdict")) == {"FAIL"}
        await pilot.press("v", "v", "v")
        assert t.row_count == 8
        # word filter
        await pilot.press("slash", "B", "1")
        assert all(s.startswith("B1-") for s in column(t, "unit")) and t.row_count == 4
        await pilot.press("enter")
        assert t.has_focus
        assert t.row_count == 4  # the filter stays after Enter
        await pilot.press("escape")  # Escape clears it
        assert t.row_count == 8
        await pilot.press("escape")  # and then goes back
        assert isinstance(app.screen, RunsScreen)
        units = await open_run(pilot, ids["run1"])
        t = units.query_one("#units", DataTable)
        await pilot.press("slash", *"drift", "enter")
        assert column(t, "unit") == [store.units(ids=[drifter])[0].serial]
        # Enter: the unit's history; its histogram agrees with numpy over the same span
        await pilot.press("enter")
        hist = await settle(pilot, HistoryScreen)
        assert hist.unit_id == drifter
        data = hist.last_data
        lo, hi = data.span
        acts = store.actuations(units=[drifter], kind=MAKE, cycles=(lo, hi))
        v = acts["bounce_us"][~np.isnan(acts["bounce_us"])]
        title = static_text(hist, "#hist-title")
        assert f"n {len(v):,}" in title
        assert f"p95 {value_text(float(np.percentile(v, 95)))}" in title
        assert f"max {value_text(float(v.max()))}" in title
        assert "DRIFT" in static_text(hist, "#chart-title")
        chart = static_text(hist, "#trend")
        assert "=" in chart and "@" in chart  # the limit line and the chart signals are drawn
        # earlier span, next metric
        await pilot.press("left_square_bracket")
        hist = await settle(pilot, HistoryScreen)
        assert hist.last_data.span == (lo - 1000, hi - 1000)
        await pilot.press("m")
        hist = await settle(pilot, HistoryScreen)
        assert hist.last_data.metric == "break_bounce"
        assert "break bounce" in static_text(hist, "#chart-title")
        # and back
        await pilot.press("escape")
        assert isinstance(app.screen, UnitsScreen)
        await pilot.press("escape", "escape")
        assert isinstance(app.screen, RunsScreen)
    store.close()


async def test_population_side_by_side(built):
    path, ids = built
    app = BenchDashboard(path, refresh_s=0)
    async with app.run_test(size=SIZE) as pilot:
        await open_run(pilot, ids["run1"])
        await pilot.press("p")  # the highlighted unit's part
        pop = await settle(pilot, PopulationScreen)
        assert pop.last_data.group.label == "PART-A"
        assert [pu.unit.id for pu in pop.last_data.units] == ids["a"]
        t = pop.query_one("#pop-units", DataTable)
        assert column(t, "unit") == ["PART-A/A1", "A1-001", "A1-002", "A1-003", "A1-004"]
        assert cell_text(t, 0, "strip") == "limit 3.00 ms"
        assert column(t, "verdict")[3] == "FAIL"  # the drifting unit
        with Store.open(path, readonly=True) as store:
            p95, mx = rolling_p95_max(store, ids["units"][2], MAKE)
        assert (cell_text(t, 3, "p95"), cell_text(t, 3, "max")) == (value_text(p95), value_text(mx))
        await pilot.press("down")
        pop = await settle(pilot, PopulationScreen)
        assert pop.last_data.group.label == "PART-B"
        assert [pu.unit.id for pu in pop.last_data.units] == ids["b"]
        await pilot.press("up", "up")  # every part, lot after lot on one scale
        pop = await settle(pilot, PopulationScreen)
        assert pop.last_data.group.kind == "all"
        assert [pu.unit.id for pu in pop.last_data.units] == ids["a"] + ids["b"]
        t = pop.query_one("#pop-units", DataTable)
        assert column(t, "unit").index("PART-A/A1") == 0 and column(t, "unit").index("PART-B/B1") == 5
        await pilot.press("tab")  # from the list of groups to the units
        assert t.has_focus
        t.move_cursor(row=3)
        await pilot.press("enter")  # Enter from this list too: the unit's history
        hist = await settle(pilot, HistoryScreen)
        assert hist.unit_id == ids["units"][2]
        await pilot.press("escape")
        await pilot.press("escape")
        assert isinstance(app.screen, UnitsScreen)


async def test_help_opens_and_closes(built):
    path, _ = built
    app = BenchDashboard(path, refresh_s=0)
    async with app.run_test(size=SIZE) as pilot:
        await settle(pilot, RunsScreen)
        await pilot.press("question_mark")
        assert type(app.screen).__name__ == "HelpScreen"
        await pilot.press("escape")
        assert isinstance(app.screen, RunsScreen)


async def test_live_run_written_by_another_thread(tmp_path):
    """A writer thread records while the dashboard reads once a second (here 0.1 s): the counts grow
    and end equal to the store's; the dashboard never blocks the writer (read-only, WAL)."""
    path = str(tmp_path / "live.sqlite")
    from ._build import register

    store = Store.open(path)
    units = register(store, "PART-L", "Supplier L", "L1", ["L1-001", "L1-002"])
    bench = store.register_bench("bench-live", channels=2)
    writer = store.start_run(bench, dict(enumerate(units)), profile={}, target_cycles=5000)
    writer.add(actuations=actuations(range(2), 0, 199, seed=1))
    writer.flush()
    go = threading.Event()
    done = threading.Event()
    errors = []

    def record():
        try:
            go.wait(10)
            for lo in range(200, 1200, 200):
                writer.add(actuations=actuations(range(2), lo, lo + 199, seed=lo))
                writer.flush()
                done.wait(0.15)
        except Exception as exc:  # noqa: BLE001 - reported by the test below
            errors.append(exc)
        finally:
            done.set()

    thread = threading.Thread(target=record)
    thread.start()
    app = BenchDashboard(path, refresh_s=0.1)
    seen = []
    async with app.run_test(size=SIZE) as pilot:
        runs = await settle(pilot, RunsScreen)
        assert cell_text(runs.query_one("#runs", DataTable), 0, "state") == "LIVE"
        await pilot.press("enter")
        scr = await settle(pilot, UnitsScreen)
        go.set()
        t = scr.query_one("#units", DataTable)
        while not done.is_set():
            seen.append(cell_text(t, 0, "cycles"))
            await pilot.pause(0.05)
        thread.join()
        await pilot.pause(0.3)
        await settle(pilot, UnitsScreen)
        with Store.open(path, readonly=True) as ro:
            expect = ro.run_units(writer.run_id)[0].unit.cycles
        assert cell_text(t, 0, "cycles") == cycles_text(expect) == "1,200"
    assert not errors
    assert len(set(seen)) >= 3, seen  # it showed the run growing, not only its start and end
    writer.close("stopped")
    store.close()


async def test_missing_database_then_created(tmp_path):
    path = str(tmp_path / "later.sqlite")
    app = BenchDashboard(path, refresh_s=0.1)
    async with app.run_test(size=SIZE) as pilot:
        scr = await settle(pilot, RunsScreen)
        assert scr.problem is not None and scr.problem.kind == "missing"
        assert "No benchlog database at" in flat(static_text(scr, "#alert"))
        build(path, cycles=500)
        table = scr.query_one("#runs", DataTable)
        await until(pilot, lambda: scr.problem is None and table.row_count, "the new file's runs")
        assert scr.query_one("#runs", DataTable).row_count == 2


async def test_empty_and_foreign_files_give_a_message(tmp_path):
    empty = tmp_path / "empty.sqlite"
    empty.write_bytes(b"")
    app = BenchDashboard(str(empty), refresh_s=0)
    async with app.run_test(size=SIZE) as pilot:
        scr = await settle(pilot, RunsScreen)
        assert scr.problem.kind == "no_schema"
        assert "Not a current benchlog database" in flat(static_text(scr, "#alert"))
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(os.urandom(4096))
    app = BenchDashboard(str(junk), refresh_s=0)
    async with app.run_test(size=SIZE) as pilot:
        scr = await settle(pilot, RunsScreen)
        assert scr.problem is not None  # a message, not a traceback


async def test_database_file_replaced_and_removed(tmp_path):
    path = tmp_path / "bench.sqlite"
    build(str(path), cycles=500)
    other = tmp_path / "other.sqlite"
    ids = build(str(other), cycles=300)
    with Store.open(str(other)) as s:  # a third run, so the two files differ
        w = s.start_run(s.benches()[0].id, {0: ids["a"][0]}, profile={}, target_cycles=10)
        w.close("stopped")
    app = BenchDashboard(str(path), refresh_s=0.1)
    async with app.run_test(size=SIZE) as pilot:
        scr = await settle(pilot, RunsScreen)
        t = scr.query_one("#runs", DataTable)
        assert t.row_count == 2
        path.unlink()
        for suffix in ("-wal", "-shm"):
            p = tmp_path / f"bench.sqlite{suffix}"
            if p.exists():
                p.unlink()
        await until(pilot, lambda: scr.problem is not None, "the removed file to be noticed")
        assert scr.problem.kind == "missing"
        assert t.row_count == 2  # the last data read stays on screen
        os.replace(other, path)
        await until(pilot, lambda: scr.problem is None and t.row_count == 3, "the replacement's runs")
        assert t.row_count == 3 and scr.problem is None


@pytest.mark.parametrize("value", [math.nan, 1234.5])
def test_value_text(value):
    assert value_text(value) == ("-" if math.isnan(value) else "1.23")


def test_a_long_run_fills_in_batch_by_batch(built):
    """With no budget for first reads, each refresh reads one trend; the rows end as a full read's."""
    from benchlog.views.tui._data import TrendCache, read_run

    path, ids = built
    with Store.open(path, readonly=True) as store:
        full = read_run(store, ids["run1"], TrendCache(first_budget_s=math.inf))  # whole, however slow
        assert full.complete
        cache = TrendCache(first_budget_s=0.0)
        batches = 0
        while True:
            part = read_run(store, ids["run1"], cache)
            batches += 1
            if part.complete:
                break
            assert part.missing > 0 and len(part.units) == 8  # every unit is there, figures come later
        assert batches > 8
        assert [u.figures for u in part.units] == [u.figures for u in full.units]
        assert [u.verdict for u in part.units] == [u.verdict for u in full.units]


async def test_a_refresh_due_while_the_dashboard_closes_is_harmless(tmp_path):
    """The refresh timer can fire once more after the last screen has gone (a loaded suite run raised
    ScreenStackError there, at the end of test_live_run_written_by_another_thread)."""
    app = BenchDashboard(str(tmp_path / "none.sqlite"), refresh_s=0)
    async with app.run_test(size=SIZE) as pilot:
        await settle(pilot, RunsScreen)
    assert not app.screen_stack
    app.action_refresh_now()  # the timer's call, with no screen left
