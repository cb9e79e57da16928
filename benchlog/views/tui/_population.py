"""Populations: the units of one part or lot side by side, on one scale, against the limit."""

from __future__ import annotations

import math

import numpy as np
from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.widgets import DataTable, Footer, OptionList, Static
from textual.widgets.option_list import Option

from ._base import DIM_STYLE, FAIL_STYLE, DataScreen, StatusLine
from ._data import (
    CHART_METRICS,
    FAIL,
    POP_METRICS,
    Group,
    Population,
    TrendCache,
    cycles_text,
    read_population,
    value_text,
)
from ._units import VERDICT_STYLE

NAME_W = 16
# the per-lot table's abbreviations, one line under it (fits the body beside the list of groups at 80)
SUMMARY_KEY = "failed: units failed  FAIL: verdicts  p95 med/top: units' p95"
STRIP_KEY = "- to p50  = to p95  . to max  x max  | limit"


def mixed_limits(units, limits: dict[int, float | None]) -> bool:
    """True when the units' parts have different limits on the metric (a 1 ms relay beside a 3 ms
    switch): each figure is then shown as a percentage of its own part's limit."""
    return len({limits.get(pu.unit.part_id) for pu in units} - {None}) > 1


def scaled(v: float, limit: float | None, percent: bool) -> float:
    """A figure in the screen's units: us as they are, or per cent of `limit` (NaN without one)."""
    if not percent:
        return v
    return math.nan if limit is None or limit <= 0 else v / limit * 100.0


def figure_text(v: float, percent: bool) -> str:
    if not percent:
        return value_text(v)
    return "-" if v is None or math.isnan(v) else f"{v:.0f}%"


def strip(p50: float, p95: float, mx: float, limit: float | None, top: float, width: int) -> Text:
    """One unit on a shared scale: '-' from 0 to p50, '=' p50 to p95, '.' p95 to max, 'x' at the
    max, '|' at the limit."""
    cells = [" "] * width
    styles = [""] * width

    def col(v: float) -> int:
        return int(min(width - 1, max(0, round(v / top * (width - 1))))) if top > 0 else 0

    if not math.isnan(p50):
        for i in range(col(p50) + 1):
            cells[i], styles[i] = "-", "green"
        if not math.isnan(p95):
            for i in range(col(p50), col(p95) + 1):
                cells[i], styles[i] = "=", "yellow"
        if not math.isnan(mx):
            for i in range(col(p95 if not math.isnan(p95) else p50), col(mx)):
                cells[i], styles[i] = ".", "red"
            cells[col(mx)], styles[col(mx)] = "x", "bold red"
    if limit is not None:
        c = col(limit)
        cells[c], styles[c] = "|", "bold white on red" if cells[c] not in (" ", "|") else "bold red"
    out = Text()
    for ch, st in zip(cells, styles, strict=True):
        out.append(ch, style=st or None)
    return out


class PopulationScreen(DataScreen):
    CSS_PATH = "_population.tcss"
    BINDINGS = [
        Binding("escape", "back", "Back"),
        Binding("m", "metric", "Metric"),
    ]

    def __init__(self, group: Group | None = None) -> None:
        super().__init__()
        self.group = group
        self.metric = POP_METRICS[0]
        self.cache = TrendCache()
        self._groups: list[Group] = []

    def compose(self) -> ComposeResult:
        yield Static("Populations: units side by side", id="pop-title")
        with Horizontal():
            yield OptionList(id="groups")
            with Vertical(id="pop-body"):
                yield Static("", id="pop-summary")
                yield Static(Text(SUMMARY_KEY, style=DIM_STYLE), id="pop-summary-key")
                yield DataTable(id="pop-units", cursor_type="row", zebra_stripes=False)
                yield Static("", id="pop-key")
        yield StatusLine()
        yield Footer()

    def on_mount(self) -> None:
        t = self.query_one("#pop-units", DataTable)
        for label, key in (("Unit", "unit"), ("on one scale", "strip"), ("Verdict", "verdict")):
            t.add_column(label, key=key)
        t.add_column("p95", key="p95")
        t.add_column("max", key="max")
        t.add_column("", key="life")
        self.request()

    def params(self):
        return self.group

    def load(self, store, group) -> Population:
        return read_population(store, group, self.cache)

    def is_stale(self, data: Population) -> bool:
        # The highlight is the user's choice: a read of another group is dropped, never shown, so
        # showing it can never move the highlight back and ask for that group again.
        return self.group is not None and data.group != self.group

    def show(self, data: Population) -> None:
        if self.group is None:
            self.group = data.group
        ol = self.query_one("#groups", OptionList)
        if list(data.groups) != self._groups:
            self._groups = list(data.groups)
            ol.clear_options()
            ol.add_options([Option(Text(g.title), id=f"{g.kind}:{g.key}") for g in data.groups])
            if self.group in self._groups:
                ol.highlighted = self._groups.index(self.group)
        elif ol.highlighted is None and self.group in self._groups:
            ol.highlighted = self._groups.index(self.group)
        self._draw(data)

    def _draw(self, data: Population) -> None:
        words = CHART_METRICS[self.metric][0]
        limits = {pid: v for (pid, m), v in data.limits.items() if m == self.metric}
        pct = mixed_limits(data.units, limits)
        scale = "% of each part's limit" if pct else "ms"
        title = Text(f"{data.group.title if data.group else 'no parts'}", style="bold")
        title.append(f"  {words} ({scale}), last 10 windows   m: next metric", style=DIM_STYLE)
        self.query_one("#pop-title", Static).update(title)
        if not data.units:
            self.query_one("#pop-summary", Static).update(Text("No units in this group.", style=DIM_STYLE))
            self.query_one("#pop-units", DataTable).clear()
            return
        # per lot summary
        lots: dict[str, list] = {}
        for pu in data.units:
            lots.setdefault(f"{pu.unit.part_number}/{pu.unit.lot}", []).append(pu)
        summary = Table(box=None, padding=(0, 1), header_style="bold")
        for col in ("lot", "units", "failed", "FAIL", "p95 med", "p95 top", "max", "cycles"):
            summary.add_column(col, justify="right" if col != "lot" else "left")
        for lot, pus in lots.items():  # noqa: B007 - the lot label is the first cell
            lim = limits.get(pus[0].unit.part_id)  # a lot is of one part
            p95 = np.array([scaled(pu.figures[self.metric].p95, lim, pct) for pu in pus])
            mx = np.array([scaled(pu.figures[self.metric].max, lim, pct) for pu in pus])
            failed = sum(pu.unit.status == "failed" for pu in pus)
            bad = sum(pu.verdict == FAIL for pu in pus)
            has = ~np.isnan(p95)
            summary.add_row(
                Text(lot),
                str(len(pus)),
                Text(str(failed), style=FAIL_STYLE if failed else ""),
                str(bad),
                figure_text(float(np.median(p95[has])), pct) if has.any() else "-",
                figure_text(float(np.max(p95[has])), pct) if has.any() else "-",
                figure_text(float(np.nanmax(mx)), pct) if (~np.isnan(mx)).any() else "-",
                cycles_text(int(np.median([pu.unit.cycles for pu in pus]))),
            )
        self.query_one("#pop-summary", Static).update(summary)
        shown = {pu.unit.part_id for pu in data.units}
        if pct:  # every limit is 100 % of itself
            vals = [
                scaled(pu.figures[self.metric].max, limits.get(pu.unit.part_id), True) for pu in data.units
            ]
            vals.append(100.0)
        else:
            vals = [pu.figures[self.metric].max for pu in data.units]
            vals += [v for p, v in limits.items() if v and p in shown]
        vals = [v for v in vals if v is not None and not math.isnan(v)]
        top = max(vals) * 1.05 if vals and max(vals) > 0 else 1.0
        t = self.query_one("#pop-units", DataTable)
        width = max(16, (t.size.width or 76) - NAME_W - 46)
        keep = self._unit_at_cursor()
        t.clear()
        self._row_units: list[int | None] = []
        prev_lot = None
        for pu in data.units:
            lot = f"{pu.unit.part_number}/{pu.unit.lot}"
            limit = limits.get(pu.unit.part_id)
            if lot != prev_lot:
                # as wide as a strip at most, so the columns after it stay on an 80-column screen
                if limit is None:
                    lim = "no limit: off scale" if pct else "no limit"
                else:
                    lim = f"{value_text(limit)} ms = 100%" if pct else f"limit {value_text(limit)} ms"
                head = Text(lim[:width], style=DIM_STYLE)
                t.add_row(Text(lot, style="bold underline"), head, "", "", "", "")
                self._row_units.append(None)
                prev_lot = lot
            f = pu.figures[self.metric]
            label = {0: "PASS", 1: "MARGINAL", 2: "FAIL"}.get(pu.verdict, "NO DATA")
            p50, p95, mx = (scaled(v, limit, pct) for v in (f.p50, f.p95, f.max))
            t.add_row(
                Text(pu.unit.serial[-NAME_W:]),
                strip(p50, p95, mx, (100.0 if pct else limit) if limit is not None else None, top, width),
                Text(label, style=VERDICT_STYLE.get(pu.verdict, DIM_STYLE)),
                figure_text(p95, pct),
                figure_text(mx, pct),
                Text("FAILED", style=FAIL_STYLE) if pu.unit.status == "failed" else "",
                key=str(pu.unit.id),
            )
            self._row_units.append(pu.unit.id)
        if keep in self._row_units:
            t.move_cursor(row=self._row_units.index(keep))
        span = f"0-{top:.0f}% of limit" if pct else f"0-{top / 1000:.3g} ms"
        self.query_one("#pop-key", Static).update(Text(f"{span}: {STRIP_KEY}", style=DIM_STYLE))

    def on_resize(self, _event) -> None:
        # the list of groups gives way on a narrow terminal, so each unit's verdict and figures stay
        self.query_one("#groups", OptionList).styles.width = 24 if self.size.width >= 100 else 16
        if isinstance(self.last_data, Population):
            self._draw(self.last_data)

    def _unit_at_cursor(self) -> int | None:
        rows = getattr(self, "_row_units", [])
        t = self.query_one("#pop-units", DataTable)
        return rows[t.cursor_row] if 0 <= t.cursor_row < len(rows) else None

    def on_data_table_row_selected(self, _event) -> None:
        unit = self._unit_at_cursor()
        if unit is not None:
            from ._history import HistoryScreen

            self.app.push_screen(HistoryScreen(unit, metric=self.metric))

    def on_option_list_option_highlighted(self, event: OptionList.OptionHighlighted) -> None:
        if not self._groups or event.option_index >= len(self._groups):
            return
        g = self._groups[event.option_index]
        if g != self.group:
            self.group = g
            self.request()

    def action_metric(self) -> None:
        i = POP_METRICS.index(self.metric)
        self.metric = POP_METRICS[(i + 1) % len(POP_METRICS)]
        if isinstance(self.last_data, Population):
            self._draw(self.last_data)

    def action_back(self) -> None:
        self.app.pop_screen()
