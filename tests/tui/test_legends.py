"""Every mark a chart draws is in the legend beside it, and every legend is one line of an 80-column
terminal (issue 15: `@`, `^`, `#`, "signal", "roll", "Inc", "p95 med / p95 top" had no legend)."""

from __future__ import annotations

from textual.widgets import DataTable, Static

from benchlog.views.tui import BenchDashboard
from benchlog.views.tui._history import HistoryScreen
from benchlog.views.tui._plots import Y_LABEL
from benchlog.views.tui._population import PopulationScreen
from benchlog.views.tui._runs import RunsScreen
from benchlog.views.tui._units import UnitsScreen

from ._pilot import column, settle
from .test_dashboard import static_text

SIZE = (80, 24)


def plot_marks(chart: str) -> set[str]:
    """The characters drawn inside a chart's plot area (right of the y axis labels, above the x axis)."""
    rows = chart.splitlines()[:-2]
    return {c for row in rows for c in row[Y_LABEL:]} - {" "}


def axis_marks(chart: str) -> set[str]:
    """What is drawn on a chart's x axis line besides the line itself."""
    return set(chart.splitlines()[-2][Y_LABEL:]) - {"-", "+", " "}


def in_legend(mark: str, legend: str) -> bool:
    """A legend names each mark as `<mark> <words>` (a series may show two marks side by side)."""
    return any(tok == mark or (len(tok) <= 2 and mark in tok) for tok in legend.split())


def one_line(screen, selector: str) -> str:
    w = screen.query_one(selector, Static)
    text = static_text(screen, selector)
    assert w.size.height == 1 and "\n" not in text, (selector, text)
    assert len(text) <= SIZE[0], (selector, text)
    return text


async def test_every_chart_mark_is_in_its_legend_at_80_columns(built):
    path, ids = built
    app = BenchDashboard(path, refresh_s=0, show_timing=False)
    async with app.run_test(size=SIZE) as pilot:
        runs = await settle(pilot, RunsScreen)
        key = one_line(runs, "#runs-key")
        for heading in ("Done ", "Inc ", "Link: "):  # the abbreviated headings on screen
            assert heading in key, heading
        t = runs.query_one("#runs", DataTable)
        t.move_cursor(row=column(t, "run").index(str(ids["run1"])))
        await pilot.press("enter")
        units = await settle(pilot, UnitsScreen)
        key = one_line(units, "#units-key")
        drift = column(units.query_one("#units", DataTable), "drift")
        shown = {w for cell in drift for w in cell.replace("+", " ").split() if w != "steady"}
        assert shown, drift  # the drifting unit is there
        for word in shown:  # mk, brk, op, rel, @<cycle>, over
            assert (word if not word.startswith("@") else "@N") in key, word
        assert "Ch channel" in key

        await pilot.press("down", "down", "enter")  # the drifting unit's history
        hist = await settle(pilot, HistoryScreen)
        legend = one_line(hist, "#legend")
        trend = static_text(hist, "#trend")
        marks = plot_marks(trend)
        assert {"@", "+", "x", "="} <= marks, trend  # signals, p95, max, the limit line drawn
        for m in marks:
            assert in_legend(m, legend), (m, legend)
        assert "EWMA/CUSUM signal" in legend  # what a signal is, where the mark is explained
        key = one_line(hist, "#hist-key")
        chart = static_text(hist, "#hist")
        marks = plot_marks(chart) | axis_marks(chart)
        assert {"#", "^"} <= marks, chart  # bins past the limit, the limit on the axis
        for m in marks:
            assert in_legend(m, key), (m, key)
        await pilot.press("escape")

        await pilot.press("p")
        pop = await settle(pilot, PopulationScreen)
        key = one_line(pop, "#pop-key")
        strips = column(pop.query_one("#pop-units", DataTable), "strip")
        marks = {c for s in strips for c in s if not s.startswith("limit")} - {" "}
        assert {"-", "=", "|"} <= marks, strips
        for m in marks:
            assert f"{m} " in key, (m, key)
        key = one_line(pop, "#pop-summary-key")
        for heading in ("failed", "FAIL", "p95 med/top"):
            assert f"{heading}:" in key, heading
