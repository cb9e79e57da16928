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
