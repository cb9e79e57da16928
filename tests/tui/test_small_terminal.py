"""At 80x24 the screens keep what matters on screen: the runs list without sideways scrolling (the
link column included), the units' rows ahead of the pane below, the key reference inside the terminal."""

from __future__ import annotations

from textual.widgets import DataTable

from benchlog.views.tui import BenchDashboard
from benchlog.views.tui._runs import RunsScreen
from benchlog.views.tui._units import UnitsScreen

from ._pilot import column, settle

SMALL = (80, 24)


async def test_runs_fit_80_columns(built):
    path, ids = built
    app = BenchDashboard(path, refresh_s=0)
    async with app.run_test(size=SMALL) as pilot:
        scr = await settle(pilot, RunsScreen)
        t = scr.query_one("#runs", DataTable)
        assert "link" in [str(c.key.value) for c in t.ordered_columns]
        assert t.virtual_size.width <= t.size.width  # nothing off screen to the right
        row = column(t, "run").index(str(ids["run1"]))
        assert column(t, "link")[row].startswith("DOWN")
        await pilot.press("question_mark")
        await pilot.pause()
        box = app.screen.query_one("#help-box")
        assert box.region.right <= SMALL[0] and box.region.bottom <= SMALL[1]


async def test_units_keep_their_rows_at_24_lines(built):
    path, ids = built
    app = BenchDashboard(path, refresh_s=0)
    async with app.run_test(size=SMALL) as pilot:
        runs = await settle(pilot, RunsScreen)
        t = runs.query_one("#runs", DataTable)
        t.move_cursor(row=column(t, "run").index(str(ids["run1"])))
        await pilot.press("enter")
        scr = await settle(pilot, UnitsScreen)
        units = scr.query_one("#units", DataTable)
        assert units.row_count == 8 and units.size.height >= units.row_count + 1  # header and every row
