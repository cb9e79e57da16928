"""Waiting for the dashboard's thread workers from a test."""

from __future__ import annotations

import asyncio
import os
import time

from textual.widgets import DataTable

from tests.conftest import HANG_S


async def until(pilot, predicate, what: str, ceiling_s: float = HANG_S):
    """Let the app run until `predicate()` is true; fail naming `what` at a ceiling only a hang reaches."""
    end = time.monotonic() + ceiling_s
    while not predicate():
        if time.monotonic() > end:
            raise AssertionError(f"gave up after {ceiling_s:g} s waiting for {what}")
        await pilot.pause(0.05)


async def settle(pilot, screen_type=None, timeout: float = HANG_S):
    """Wait until the current screen (of `screen_type`) has shown data and no read is running."""
    app = pilot.app
    t0 = time.monotonic()
    end = t0 + timeout
    while time.monotonic() < end:
        await app.workers.wait_for_complete()
        await pilot.pause()
        scr = app.screen
        ok_type = screen_type is None or isinstance(scr, screen_type)
        if ok_type and (getattr(scr, "loaded_once", False) or getattr(scr, "problem", None)):
            if not getattr(scr, "_busy", False):
                if os.environ.get("SETTLE_DEBUG"):
                    print(f"settled {type(scr).__name__} in {time.monotonic() - t0:.2f} s")
                return scr
        await asyncio.sleep(0.02)
    raise AssertionError(f"the dashboard did not settle on {screen_type} (at {type(app.screen).__name__})")


def cell_text(table: DataTable, row: int, column: str) -> str:
    """What a cell shows, without the spaces around it (a table without cell padding puts its gap
    between columns in the cells)."""
    value = table.get_cell_at((row, table.get_column_index(column)))
    return (value.plain if hasattr(value, "plain") else str(value)).strip()


def column(table: DataTable, name: str) -> list[str]:
    return [cell_text(table, r, name) for r in range(table.row_count)]
