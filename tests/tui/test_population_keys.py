"""Keys pressed on the populations screen faster than its reads complete: the screen settles on the
group of the last key, and the highlight, the title and the data shown agree."""

from __future__ import annotations

import asyncio
import threading
import time
from pathlib import Path

from textual.widgets import OptionList

from benchlog.views.tui import BenchDashboard, _population
from benchlog.views.tui._population import PopulationScreen
from benchlog.views.tui._runs import RunsScreen

from ._pilot import settle

READ_S = 0.3  # each read takes at least this long, far longer than a key press


class SlowPopulationScreen(PopulationScreen):
    """The populations screen with slow reads, counted."""

    CSS_PATH = str(Path(_population.__file__).with_suffix(".tcss"))

    def __init__(self) -> None:
        super().__init__()
        self.reads = 0
        self._lock = threading.Lock()

    def load(self, store, group):
        with self._lock:
            self.reads += 1
        time.sleep(READ_S)
        return super().load(store, group)


async def reads_stop(pilot, screen, quiet_s: float = 4 * READ_S, ceiling_s: float = 60.0):
    """Wait until no read has started for `quiet_s`; fail if that never happens (a read loop)."""
    end = time.monotonic() + ceiling_s
    seen, since = screen.reads, time.monotonic()
    while time.monotonic() < end:
        await pilot.pause()
        await asyncio.sleep(0.05)
        if screen.reads != seen:
            seen, since = screen.reads, time.monotonic()
        elif time.monotonic() - since >= quiet_s and not screen._busy:
            return
    raise AssertionError(f"the populations screen kept reading ({screen.reads} reads): a feedback loop")


async def test_keys_faster_than_reads_settle_on_the_last_key(built):
    path, _ = built
    app = BenchDashboard(path, refresh_s=0)
    async with app.run_test(size=(100, 30)) as pilot:
        await settle(pilot, RunsScreen)
        screen = SlowPopulationScreen()
        await app.push_screen(screen)
        await settle(pilot, PopulationScreen)
        await reads_stop(pilot, screen)
        groups = screen.last_data.groups
        assert [g.title for g in groups][:3] == ["all parts", "part PART-A", "part PART-B"]
        ol = screen.query_one("#groups", OptionList)
        ol.focus()
        assert ol.highlighted == 0
        await pilot.press("down", "down")  # two keys while the first key's read is still running
        await reads_stop(pilot, screen)
        assert screen.group == groups[2]
        assert ol.highlighted == 2
        assert screen.last_data.group == groups[2]
        assert str(screen.query_one("#pop-title").render()).startswith("part PART-B")
        await pilot.press("down", "up", "down", "down", "up")  # five keys, ends on lot A1 (index 3)
        await reads_stop(pilot, screen)
        assert (screen.group, ol.highlighted, screen.last_data.group) == (groups[3], 3, groups[3])
