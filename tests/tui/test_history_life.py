"""A failed unit's history spans its own life; drift never wears the colour of a failure."""

from __future__ import annotations

import colorsys

from rich.style import Style

from benchlog.store import END_TARGET, Store
from benchlog.views.tui import BenchDashboard
from benchlog.views.tui._base import DRIFT_STYLE, FAIL_STYLE, MARGINAL_STYLE, PASS_STYLE
from benchlog.views.tui._history import HistoryScreen
from benchlog.views.tui._runs import RunsScreen

from ._build import actuations, register
from ._pilot import settle


async def test_a_failed_units_history_ends_at_its_failure(tmp_path):
    # the recorder goes on writing a failed unit's channel (a welded contact still reports); those
    # windows are not the unit's life
    path = str(tmp_path / "failed.sqlite")
    store = Store.open(path)
    (unit,) = register(store, "PART-A", "Supplier A", "A1", ["A1-001"])
    bench = store.register_bench("bench-1", channels=8)
    w = store.start_run(bench, {0: unit}, profile={"on_ms": 50, "off_ms": 50}, target_cycles=3000)
    for lo in range(0, 3000, 500):
        if lo == 500:
            w.mark_failed(unit, 687, "welded")
        w.add(actuations=actuations([0], lo, lo + 499, seed=lo))
        w.flush()
    w.close(END_TARGET)
    store.close()
    app = BenchDashboard(path, refresh_s=0)
    async with app.run_test(size=(100, 30)) as pilot:
        await settle(pilot, RunsScreen)
        await app.push_screen(HistoryScreen(unit))
        hist = await settle(pilot, HistoryScreen)
        data = hist.last_data
        assert data.unit.failed_at_cycle == 687
        assert int(data.trend.cycle_lo.max()) <= 687 and int(data.trend.cycle_hi.max()) < 800
        assert data.span == (0, 687)  # the histogram's last 1,000 cycles are the life's last
        assert len(data.values) > 0


def hue_degrees(style: str) -> float:
    r, g, b = Style.parse(style).color.get_truecolor()
    return colorsys.rgb_to_hsv(r / 255, g / 255, b / 255)[0] * 360


def test_drift_pass_marginal_and_fail_are_four_colours():
    hues = [hue_degrees(s) for s in (PASS_STYLE, MARGINAL_STYLE, FAIL_STYLE, DRIFT_STYLE)]
    for i, a in enumerate(hues):
        for b in hues[i + 1 :]:
            gap = abs(a - b) % 360
            assert (
                min(gap, 360 - gap) >= 40
            )  # hues far apart on the colour wheel (common practice, no source)
    for s in (PASS_STYLE, MARGINAL_STYLE, FAIL_STYLE, DRIFT_STYLE):
        assert Style.parse(s).color.is_system_defined is False  # not remapped by a terminal's palette


async def test_a_failed_units_history_header_says_when_in_local_time(tmp_path, monkeypatch):
    # issue 15: the wall-clock time of the failure in the local zone with its UTC offset, then run time
    import time
    from datetime import UTC, datetime

    from .test_dashboard import flat, static_text

    monkeypatch.setenv("TZ", "America/Chicago")
    time.tzset()
    try:
        path = str(tmp_path / "failed.sqlite")
        store = Store.open(path)
        (unit,) = register(store, "PART-A", "Supplier A", "A1", ["A1-001"])
        bench = store.register_bench("bench-1", channels=8)
        w = store.start_run(bench, {0: unit}, profile={"on_ms": 50, "off_ms": 50}, target_cycles=1000)
        w.add(actuations=actuations([0], 0, 499, seed=1))
        w.mark_failed(unit, 300, "welded", at=datetime(2026, 12, 3, 9, 14, 7, tzinfo=UTC))
        w.close(END_TARGET)
        store.close()
        app = BenchDashboard(path, refresh_s=0)
        async with app.run_test(size=(160, 30)) as pilot:
            await settle(pilot, RunsScreen)
            await app.push_screen(HistoryScreen(unit))
            hist = await settle(pilot, HistoryScreen)
            # 09:14:07 UTC is 03:14:07 in Chicago in December, UTC-6 (IANA tz database); the break of
            # cycle 300 of _build.actuations starts at 30.05 s of run time
            want = f"2026-12-03 03:14:07 -06:00, run {w.run_id} at 0:00:30.050"
            assert want in flat(static_text(hist, "#unit-line"))
    finally:
        monkeypatch.undo()
        time.tzset()


async def test_the_first_drift_flag_is_shown_in_local_time(tmp_path, monkeypatch):
    # issue 15: when the recorder first flagged drift, in the local zone with its UTC offset, then run time
    import time
    from datetime import UTC, datetime

    from benchlog.analysis import MAKE
    from benchlog.views.tui._units import UnitsScreen

    from .test_dashboard import flat, static_text

    monkeypatch.setenv("TZ", "Australia/Adelaide")
    time.tzset()
    try:
        path = str(tmp_path / "drift.sqlite")
        store = Store.open(path)
        (unit,) = register(store, "PART-A", "Supplier A", "A1", ["A1-001"])
        bench = store.register_bench("bench-1", channels=8)
        w = store.start_run(bench, {0: unit}, profile={"on_ms": 50, "off_ms": 50}, target_cycles=1000)
        w.add(actuations=actuations([0], 0, 499, seed=1, growth={0: 3.0}))
        w.flush()
        w.mark_drift(unit, "make_bounce", MAKE, 399, at=datetime(2026, 12, 3, 16, 5, 9, tzinfo=UTC))
        w.close(END_TARGET)
        store.close()
        # 16:05:09 UTC is 02:35:09 the next day in Adelaide in December, UTC+10:30 (IANA tz database,
        # daylight saving time); the make of cycle 399 of _build.actuations starts at 39.9 s of run time
        want = (
            "drift first flagged at cycle 399 (make bounce): "
            f"2026-12-04 02:35:09 +10:30, run {w.run_id} at 0:00:39.900"
        )
        app = BenchDashboard(path, refresh_s=0)
        async with app.run_test(size=(160, 40)) as pilot:
            await settle(pilot, RunsScreen)
            await app.push_screen(HistoryScreen(unit))
            hist = await settle(pilot, HistoryScreen)
            assert want in flat(static_text(hist, "#unit-when"))
            await app.push_screen(UnitsScreen(w.run_id))
            units = await settle(pilot, UnitsScreen)
            assert want in flat(static_text(units, "#unit-info"))
    finally:
        monkeypatch.undo()
        time.tzset()
