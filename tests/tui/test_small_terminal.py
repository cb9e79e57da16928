"""At 80x24 the screens keep what matters on screen: the runs list without sideways scrolling (the
link column included), the units' rows ahead of the pane below, every figure of a unit without
sideways scrolling (the demo's 13-character serials and 16 channels too), the key reference inside the
terminal."""

from __future__ import annotations

from rich.text import Text
from textual.widgets import DataTable

from benchlog.store import END_TARGET, Store
from benchlog.views.tui import BenchDashboard
from benchlog.views.tui._data import cycles_text, value_text
from benchlog.views.tui._help import HELP
from benchlog.views.tui._runs import RunsScreen
from benchlog.views.tui._units import UnitsScreen

from ._build import actuations, register
from ._pilot import cell_text, column, settle, until

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


async def _units_of_run1(pilot, ids) -> UnitsScreen:
    """From the runs screen, open the first run's units."""
    runs = await settle(pilot, RunsScreen)
    t = runs.query_one("#runs", DataTable)
    t.move_cursor(row=column(t, "run").index(str(ids["run1"])))
    await pilot.press("enter")
    return await settle(pilot, UnitsScreen)


async def test_units_keep_their_rows_at_24_lines(built):
    path, ids = built
    app = BenchDashboard(path, refresh_s=0)
    async with app.run_test(size=SMALL) as pilot:
        scr = await _units_of_run1(pilot, ids)
        units = scr.query_one("#units", DataTable)
        assert units.row_count == 8 and units.size.height >= units.row_count + 1  # header and every row


def demo_shaped(path: str) -> int:
    """16 units with the demo's 13-character serials: two drift (one on all four metrics), one fails by
    missed makes, one has many chatter events. Returns the run id."""
    with Store.open(path) as store:
        ag = register(
            store, "AG-MS5", "Ashgrove Components", "L1", [f"AG-MS5-L1-{i:03d}" for i in range(1, 9)]
        )
        vs = register(
            store, "VS-505", "Vellmar Switchgear", "L1", [f"VS-505-L1-{i:03d}" for i in range(1, 9)]
        )
        bench = store.register_bench("bench A", channels=16)
        units = dict(enumerate(ag + vs))
        w = store.start_run(bench, units, profile={"on_ms": 50, "off_ms": 50}, target_cycles=200_000)
        for lo in range(0, 1200, 400):
            a = actuations(range(16), lo, lo + 399, seed=lo, growth={3: 1.0, 12: 3.0})
            a = a[~((a["channel"] == 9) & (a["cycle"] >= 600))]
            a["chatter"][a["channel"] == 14] = 5
            slow = a["channel"] == 12  # its operate and release times drift too: a long drift cell
            a["transit_us"][slow] *= 1.0 + 3.0 * a["cycle"][slow] / 1000.0
            if lo <= 600 < lo + 400:
                w.mark_failed(units[9], 600, "missed_make")
            w.add(actuations=a)
            w.flush()
        w.close(END_TARGET)
        return w.run_id


def _line(table: DataTable, y: int) -> str:
    return table.render_line(y).text


async def _check_units_fit(pilot, scr: UnitsScreen) -> None:
    await until(pilot, lambda: scr.last_data.complete, "every unit's trends read")
    await pilot.pause()  # the table takes its new cells' widths
    t = scr.query_one("#units", DataTable)
    room = t.scrollable_content_region.width
    assert t.max_scroll_x == 0 and t.virtual_size.width <= room  # nothing off screen to the right
    x = 0
    header = _line(t, 0)
    for col in t.ordered_columns:
        x += col.get_render_width(t)
        assert x <= room, f"column {col.label.plain!r} ends at {x}, the table shows {room}"
        assert col.label.plain.strip() in header
    # every figure a test engineer reads for a unit is on the unit's line as the screen draws it
    for i, u in enumerate(scr.rows[: t.scrollable_content_region.height - 1]):
        line = _line(t, 1 + i)
        f = u.figures
        wanted = [str(u.channel), u.unit.serial, cycles_text(u.unit.cycles), str(u.chatter)]
        wanted += [
            value_text(f[k].p95) for k in ("make_bounce", "break_bounce", "operate_time", "release_time")
        ]
        wanted.append("FAIL" if u.unit.status == "failed" or u.verdict_label == "FAIL" else u.verdict_label)
        if u.drifting:
            wanted.append("mk")
        for w in wanted:
            assert w in line, f"{w!r} not on {u.unit.serial}'s line {line!r}"


async def test_every_unit_figure_fits_80_columns(built):
    path, ids = built
    app = BenchDashboard(path, refresh_s=0)
    async with app.run_test(size=SMALL) as pilot:
        await _check_units_fit(pilot, await _units_of_run1(pilot, ids))


async def test_demo_shaped_units_fit_80_columns_and_widen_at_160(tmp_path):
    path = str(tmp_path / "demo-shaped.sqlite")
    run_id = demo_shaped(path)
    app = BenchDashboard(path, refresh_s=0)
    async with app.run_test(size=SMALL) as pilot:
        runs = await settle(pilot, RunsScreen)
        t = runs.query_one("#runs", DataTable)
        t.move_cursor(row=column(t, "run").index(str(run_id)))
        await pilot.press("enter")
        scr = await settle(pilot, UnitsScreen)
        assert sum(u.drifting for u in scr.rows) >= 2
        assert any(u.unit.status == "failed" for u in scr.rows)
        await _check_units_fit(pilot, scr)
        units = scr.query_one("#units", DataTable)
        slow = [u.channel for u in scr.rows].index(12)
        assert cell_text(units, slow, "drift").endswith("…")  # no room for the four metrics: cut, marked
        await pilot.resize_terminal(160, 50)
        await pilot.pause()
        labels = [c.label.plain.strip() for c in units.ordered_columns]
        assert "Make" in labels and "Op/Rel" in labels  # the full table where it fits (p95/max pairs)
        await _check_units_fit(pilot, scr)
        assert cell_text(units, slow, "drift").startswith("DRIFT mk+brk+op")  # whole where it fits


async def test_help_never_wraps_a_line_at_80x24(built):
    path, _ = built
    app = BenchDashboard(path, refresh_s=0)
    async with app.run_test(size=SMALL) as pilot:
        await settle(pilot, RunsScreen)
        await pilot.press("question_mark")
        await pilot.pause()
        box = app.screen.query_one("#help-box")
        text = app.screen.query_one("#help-text")
        lines = Text.from_markup(HELP).plain.split("\n")
        assert box.region.right <= SMALL[0] and box.region.bottom <= SMALL[1]
        assert max(Text(line).cell_len for line in lines) <= text.size.width
        assert text.size.height == len(lines)  # one screen line a text line: nothing wrapped
        assert box.max_scroll_x == 0 and box.max_scroll_y > 0  # the rest is a scroll away, not clipped
        box.scroll_end(animate=False)
        await pilot.pause()
        assert box.scroll_y == box.max_scroll_y == text.size.height - box.scrollable_content_region.height
