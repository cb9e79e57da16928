"""Screenshots of every screen at 80x24 (the terminal every screen is designed for first), 100x30
and 160x50 against the accepted ones in __snapshots__/ (layout regressions show in review). Fixed
data, fixed times (in UTC), no read timings on screen, no refresh timer. Accept a deliberate change with
`pytest tests/tui/test_snapshots.py --snapshot-update`."""

from __future__ import annotations

import pytest
from textual.widgets import DataTable

from benchlog.views.tui import BenchDashboard
from benchlog.views.tui._history import HistoryScreen
from benchlog.views.tui._population import PopulationScreen
from benchlog.views.tui._runs import RunsScreen
from benchlog.views.tui._units import UnitsScreen

from ._build import build, freeze_times
from ._pilot import column, settle

SIZES = pytest.mark.parametrize("size", [(80, 24), (100, 30), (160, 50)], ids=["80x24", "100x30", "160x50"])


@pytest.fixture(autouse=True)
def utc_zone(monkeypatch):
    """Times on screen are local: the accepted screenshots are taken in UTC wherever the suite runs."""
    import time

    monkeypatch.setenv("TZ", "UTC")
    time.tzset()
    yield
    monkeypatch.undo()
    time.tzset()


@pytest.fixture(scope="module")
def frozen(tmp_path_factory):
    path = tmp_path_factory.mktemp("snap") / "store.sqlite"
    ids = build(str(path))
    freeze_times(str(path))
    return str(path), ids


def app_for(path: str) -> BenchDashboard:
    return BenchDashboard(path, refresh_s=0, show_timing=False, label="bench.sqlite")


async def _units(pilot, run_id: int) -> None:
    runs = await settle(pilot, RunsScreen)
    t = runs.query_one("#runs", DataTable)
    t.move_cursor(row=column(t, "run").index(str(run_id)))
    await pilot.press("enter")
    await settle(pilot, UnitsScreen)


@SIZES
def test_runs_screen(snap_compare, frozen, size):
    path, ids = frozen

    async def before(pilot):
        runs = await settle(pilot, RunsScreen)
        t = runs.query_one("#runs", DataTable)
        t.move_cursor(row=column(t, "run").index(str(ids["run1"])))
        await pilot.pause()

    assert snap_compare(app_for(path), terminal_size=size, run_before=before)


@SIZES
def test_units_screen(snap_compare, frozen, size):
    path, ids = frozen

    async def before(pilot):
        await _units(pilot, ids["run1"])
        await pilot.press("down", "down")  # the drifting unit

    assert snap_compare(app_for(path), terminal_size=size, run_before=before)


@SIZES
def test_history_screen(snap_compare, frozen, size):
    path, ids = frozen

    async def before(pilot):
        await _units(pilot, ids["run1"])
        await pilot.press("down", "down", "enter")
        await settle(pilot, HistoryScreen)

    assert snap_compare(app_for(path), terminal_size=size, run_before=before)


@SIZES
def test_population_screen(snap_compare, frozen, size):
    path, ids = frozen

    async def before(pilot):
        await _units(pilot, ids["run1"])
        await pilot.press("p")
        await settle(pilot, PopulationScreen)

    assert snap_compare(app_for(path), terminal_size=size, run_before=before)


@SIZES
def test_help_screen(snap_compare, frozen, size):
    path, _ = frozen

    async def before(pilot):
        await settle(pilot, RunsScreen)
        await pilot.press("question_mark")
        await pilot.pause()

    assert snap_compare(app_for(path), terminal_size=size, run_before=before)


async def test_the_history_chart_is_drawn_again_when_its_room_changes(frozen):
    """The chart is drawn for the room it has. The layout can settle after the data is shown (seen as a
    history screenshot at 80x24 drawn for a shorter chart, once in a suite run): the chart must follow."""
    path, ids = frozen
    async with app_for(path).run_test(size=(80, 24)) as pilot:
        await _units(pilot, ids["run1"])
        await pilot.press("down", "down", "enter")
        scr = await settle(pilot, HistoryScreen)
        trend = scr.query_one("#trend")
        before = trend.size.height
        assert str(trend.content).count("\n") + 1 == before  # drawn for its room (a line a row)
        scr.query_one("#hist").styles.height = 3  # the histogram gives the chart rows
        for _ in range(3):
            await pilot.pause()
        assert trend.size.height > before
        assert str(trend.content).count("\n") + 1 == trend.size.height
