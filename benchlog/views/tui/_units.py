"""The units of one run: life, bounce, timing, chatter, verdict and drift, sortable and filterable."""

from __future__ import annotations

import math

from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.widgets import DataTable, Footer, Input, Static

from benchlog.store import FAILED, REMOVED
from benchlog.views._times import first_break_text, first_drift_text

from ._base import DIM_STYLE, DRIFT_STYLE, FAIL_STYLE, MARGINAL_STYLE, PASS_STYLE, DataScreen, StatusLine
from ._data import (
    CHART_METRICS,
    FAIL,
    MARGINAL,
    PASS,
    RunDetail,
    TrendCache,
    UnitRow,
    cycles_text,
    duration_text,
    read_run,
    value_text,
)
from ._runs import outage_text

VERDICT_STYLE = {PASS: PASS_STYLE, MARGINAL: MARGINAL_STYLE, FAIL: FAIL_STYLE}
VERDICT_ORDER = {FAIL: 0, MARGINAL: 1, PASS: 2}

SORTS = {
    "channel": lambda r: r.channel,
    "verdict": lambda r: (VERDICT_ORDER.get(r.verdict, 3), r.channel),
    "drift": lambda r: (not r.drifting, _crossing(r), r.channel),
    "cycles": lambda r: (-r.unit.cycles, r.channel),
    "make bounce": lambda r: (-_nz(r.figures["make_bounce"].p95), r.channel),
    "break bounce": lambda r: (-_nz(r.figures["break_bounce"].p95), r.channel),
    "part/lot": lambda r: (r.unit.part_number, r.unit.lot, r.channel),
}
VERDICT_FILTERS = (None, FAIL, MARGINAL, PASS)
# the table's abbreviations, one line under it (the view line above it names the figures' units)
UNITS_KEY = "Ch channel  Drift: mk/brk bounce, op/rel time, @N limit near N, over: past it"
# the compact table's figure headings are the drift cell's names (mk brk op rel), explained once
COMPACT_KEY = "Ch channel  mk/brk bounce, op/rel time  Drift: @N limit near N, over: past it"
FAILURE_WORDS = {"welded": "welded", "missed_make": "no make", "chatter": "chatter"}


def _nz(v: float) -> float:
    return -1.0 if math.isnan(v) else v


def _crossing(r: UnitRow) -> float:
    c = [d.crossing_cycle for d in r.drift if d.signalled and d.crossing_cycle is not None]
    return min(c) if c else math.inf


def verdict_text(row) -> Text:
    return Text(row.verdict_label, style=VERDICT_STYLE.get(row.verdict, DIM_STYLE))


def life_text(row: UnitRow) -> Text:
    return Text(row.life_text, style=FAIL_STYLE if row.unit.status == "failed" else "")


def drift_cell(row: UnitRow, word: bool = True) -> Text:
    """`DRIFT mk+brk @12k`; without `word` (a narrow table, under its Drift heading) `mk+brk @12k`."""
    sig = [d for d in row.drift if d.signalled]
    if not sig:
        return Text("steady", style=DIM_STYLE)
    first = min(sig, key=lambda d: d.crossing_cycle if d.crossing_cycle is not None else math.inf)
    short = {"make bounce": "mk", "break bounce": "brk", "operate time": "op", "release time": "rel"}
    names = "+".join(short.get(d.words, d.words) for d in sig)
    if first.past_limit:
        cross = " over"
    elif first.failed_at is not None:
        cross = ""
    else:
        cross = f" @{cycles_text(first.crossing_cycle)}" if first.crossing_cycle is not None else ""
    return Text(f"{'DRIFT ' if word else ''}{names}{cross}", style=DRIFT_STYLE)


def pair(f) -> str:
    return f"{value_text(f.p95)}/{value_text(f.max)}"


def status_text(row: UnitRow) -> Text:
    """The compact table's one word for a unit: its verdict while it lives, or `FAILED` and how (a failed
    unit fails its verdict)."""
    u = row.unit
    if u.status == FAILED:
        mode = u.failure_mode or ""
        return Text(f"FAILED {FAILURE_WORDS.get(mode, mode.replace('_', ' '))}".rstrip(), style=FAIL_STYLE)
    if u.status == REMOVED:
        return Text("REMOVED", style=DIM_STYLE)
    return verdict_text(row)


def compact_cells(u: UnitRow) -> dict[str, Text]:
    """The cells of the compact table: p95 only, one column a figure, each cell led by its one-space
    gap (the compact table has no cell padding)."""
    f = u.figures
    cells = {
        "ch": Text(str(u.channel), justify="right"),
        "unit": Text(u.unit.serial),
        "cycles": Text(cycles_text(u.unit.cycles), justify="right"),
        "status": status_text(u),
        "mk": Text(value_text(f["make_bounce"].p95), justify="right"),
        "brk": Text(value_text(f["break_bounce"].p95), justify="right"),
        "op": Text(value_text(f["operate_time"].p95), justify="right"),
        "rel": Text(value_text(f["release_time"].p95), justify="right"),
        "chat": Text(str(u.chatter), justify="right"),
        "drift": drift_cell(u, word=False),
    }
    for c in cells.values():
        c.pad_left(1)
    return cells


def wide_cells(u: UnitRow) -> dict[str, Text | str]:
    f = u.figures
    return {
        "ch": str(u.channel),
        "unit": Text(u.unit.serial),
        "cycles": cycles_text(u.unit.cycles),
        "life": life_text(u),
        "verdict": verdict_text(u),
        "make": pair(f["make_bounce"]),
        "break": pair(f["break_bounce"]),
        "drift": drift_cell(u),
        "oprel": f"{value_text(f['operate_time'].p95)}/{value_text(f['release_time'].p95)}",
        "chat": str(u.chatter),
    }


def _width(cell: Text | str) -> int:
    return cell.cell_len if isinstance(cell, Text) else Text(cell).cell_len


class UnitsScreen(DataScreen):
    CSS_PATH = "_units.tcss"
    BINDINGS = [
        Binding("escape", "back", "Back"),
        Binding("slash", "filter", "Filter"),
        Binding("s", "sort", "Sort"),
        Binding("o", "reverse", "Order"),
        Binding("v", "verdict", "Verdict"),
        Binding("d", "drift", "Drifting"),
        Binding("p", "population('part')", "Part"),
        Binding("l", "population('lot')", "Lot"),
    ]

    def __init__(self, run_id: int) -> None:
        super().__init__()
        self.run_id = run_id
        self.cache = TrendCache()
        self.sort_key = "channel"
        self.reverse = False
        self.verdict_filter: int | None = None
        self.drift_only = False
        self.filter_text = ""
        self.rows: list[UnitRow] = []  # as shown, after sorting and filtering

    def compose(self) -> ComposeResult:
        yield Static(f"Run {self.run_id}", id="run-line")
        yield Static(Text(" reading the run ...", style=DIM_STYLE), id="view-line")
        yield DataTable(id="units", cursor_type="row", zebra_stripes=True)
        yield Static(Text(UNITS_KEY, style=DIM_STYLE), id="units-key")
        yield Input(
            placeholder="filter: words to match (serial, part, lot, pass/marginal/fail, drift)", id="filter"
        )
        yield Static("", id="unit-info")
        yield StatusLine()
        yield Footer()

    # the full table where it fits; else one column a figure (p95; the max folds into the pane below)
    WIDE_COLUMNS = (
        ("Ch", "ch"),
        ("Unit", "unit"),
        ("Cycles", "cycles"),
        ("Life", "life"),
        ("Verdict", "verdict"),
        ("Make", "make"),
        ("Break", "break"),
        ("Drift", "drift"),
        ("Op/Rel", "oprel"),
        ("Chatter", "chat"),
    )
    COMPACT_COLUMNS = (
        ("Ch", "ch"),
        ("Unit", "unit"),
        ("Cycles", "cycles"),
        ("Status", "status"),
        ("Mk", "mk"),
        ("Brk", "brk"),
        ("Op", "op"),
        ("Rel", "rel"),
        ("Chatter", "chat"),
        ("Drift", "drift"),
    )
    RIGHT = frozenset({"ch", "cycles", "mk", "brk", "op", "rel", "chat"})

    def on_mount(self) -> None:
        self._wide: bool | None = None
        self._layout(True)
        self.query_one("#filter", Input).display = False
        self._fit_pane()
        self.request()

    def _layout(self, wide: bool) -> None:
        if wide == self._wide:
            return
        self._wide = wide
        t = self.query_one("#units", DataTable)
        t.clear(columns=True)
        t.cell_padding = 1 if wide else 0
        for label, key in self.WIDE_COLUMNS if wide else self.COMPACT_COLUMNS:
            if wide:
                t.add_column(label, key=key)
            else:
                t.add_column(Text(f" {label}", justify="right" if key in self.RIGHT else "left"), key=key)
        self.query_one("#units-key", Static).update(Text(UNITS_KEY if wide else COMPACT_KEY, style=DIM_STYLE))

    def _room(self) -> int:
        """The columns the table can fill without scrolling sideways: the screen's, less a scrollbar."""
        return self.size.width - self.query_one("#units", DataTable).styles.scrollbar_size_vertical

    def _fits_wide(self, units: list[UnitRow]) -> bool:
        """Whether the full table fits (measured on every unit of the run, so a filter keeps the layout)."""
        if self.size.width == 0:
            return True
        cells = [wide_cells(u) for u in units]
        need = sum(
            max([len(label)] + [_width(c[key]) for c in cells]) + 2 for label, key in self.WIDE_COLUMNS
        )
        return need <= self._room()

    def on_resize(self, _event) -> None:
        self._fit_pane()
        if isinstance(self.last_data, RunDetail):
            self._fill()

    def _fit_pane(self) -> None:
        """On a short terminal (24 lines) the units keep the room: the pane below shrinks to a few
        lines (the highlighted unit's part, life and verdict first), at 30 lines and more it has 9."""
        tall = self.size.height >= 30 or self.size.height == 0
        self.query_one("#unit-info", Static).styles.max_height = 9 if tall else max(3, self.size.height - 21)

    def params(self):
        return self.run_id

    def load(self, store, run_id) -> RunDetail:
        return read_run(store, run_id, self.cache)

    # -- showing ------------------------------------------------------------------------------------
    def show(self, data: RunDetail) -> None:
        r = data.run
        head = Text(f"Run {r.id} on {r.bench}  ", style="bold")
        state = {"live": ("LIVE", PASS_STYLE), "interrupted": ("INTERRUPTED", MARGINAL_STYLE)}.get(
            r.state, ("ENDED", DIM_STYLE)
        )
        head.append(state[0], style=state[1])
        target = cycles_text(r.target_cycles) if r.target_cycles else "open"
        head.append(f"  cycles {cycles_text(r.cycles_done)}/{target}")
        if r.state == "live":
            head.append(f"  {r.rate_cps:.1f} c/s  left {duration_text(r.eta_s)}")
        head.append(f"  units {r.units}, failed {r.units_failed}  link ")
        from ._data import RunRow

        head.append_text(outage_text(RunRow(r, r.state, data.outage, {})))
        self.query_one("#run-line", Static).update(head)
        self._fill()

    def _visible(self) -> list[UnitRow]:
        data = self.last_data
        if not isinstance(data, RunDetail):
            return []
        rows = list(data.units)
        if self.verdict_filter is not None:
            rows = [u for u in rows if u.verdict == self.verdict_filter]
        if self.drift_only:
            rows = [u for u in rows if u.drifting]
        words = self.filter_text.lower().split()
        if words:
            rows = [u for u in rows if all(w in u.search_text() for w in words)]
        rows.sort(key=SORTS[self.sort_key], reverse=self.reverse)
        return rows

    def _fill(self) -> None:
        t = self.query_one("#units", DataTable)
        selected = self._selected()
        keep = selected.unit.id if selected else None
        data = self.last_data
        self._layout(self._fits_wide(data.units if isinstance(data, RunDetail) else []))
        self.rows = self._visible()
        t.clear()
        if self._wide:
            keys = [k for _, k in self.WIDE_COLUMNS]
            rows = [wide_cells(u) for u in self.rows]
        else:
            keys = [k for _, k in self.COMPACT_COLUMNS]
            rows = [compact_cells(u) for u in self.rows]
            self._fit_drift(rows)
        for u, cells in zip(self.rows, rows, strict=True):
            t.add_row(*(cells[k] for k in keys), key=str(u.unit.id))
        if self.rows:
            idx = next((i for i, u in enumerate(self.rows) if u.unit.id == keep), 0)
            t.move_cursor(row=idx)
        if self._wide:
            view = Text(" ms, last 10 windows: make/break p95/max, op/rel p95", style=DIM_STYLE)
        else:
            view = Text(" ms, p95 of the last 10 windows", style=DIM_STYLE)
        view.append(f"   sort: {self.sort_key}{' (reversed)' if self.reverse else ''}")
        if self.verdict_filter is not None:
            view.append(f"   verdict: {VERDICT_LABEL_SHORT[self.verdict_filter]}")
        if self.drift_only:
            view.append("   drifting only")
        if self.filter_text:
            view.append(f"   filter: {self.filter_text!r}")
        total = len(self.last_data.units) if isinstance(self.last_data, RunDetail) else 0
        view.append(f"   {len(self.rows)} of {total} units")
        if isinstance(self.last_data, RunDetail) and not self.last_data.complete:
            view.append(f"   reading trends, {self.last_data.missing} to go", style="bold")
        self.query_one("#view-line", Static).update(view)
        self._show_info()

    def _fit_drift(self, rows: list[dict[str, Text]]) -> None:
        """The drift cell, last, takes what the other compact columns leave; a longer one ends in an
        ellipsis (the pane below has the whole flag in words)."""
        other = sum(
            max([len(label) + 1] + [c[key].cell_len for c in rows])
            for label, key in self.COMPACT_COLUMNS
            if key != "drift"
        )
        room = max(len(" Drift"), self._room() - other)
        for c in rows:
            c["drift"].truncate(room, overflow="ellipsis")

    def _selected(self) -> UnitRow | None:
        t = self.query_one("#units", DataTable)
        i = t.cursor_row
        return self.rows[i] if self.rows and 0 <= i < len(self.rows) else None

    def on_data_table_row_highlighted(self, _event) -> None:
        self._show_info()

    def _show_info(self) -> None:
        u = self._selected()
        info = self.query_one("#unit-info", Static)
        if u is None:
            info.update(Text("No units match." if self.last_data else "", style=DIM_STYLE))
            return
        grid = Table.grid(padding=(0, 1))
        for _ in range(8):
            grid.add_column(justify="right")
        grid.add_row("ms", "latest p50", "p95", "max", "last-10 p50", "p95", "max", "windows")
        for key in ("make_bounce", "break_bounce", "operate_time", "release_time"):
            f = u.figures[key]
            grid.add_row(
                CHART_METRICS[key][0],
                *(value_text(v) for v in (f.latest_p50, f.latest_p95, f.latest_max, f.p50, f.p95, f.max)),
                str(f.windows),
            )
        head = Text(f"{u.unit.serial}", style="bold")
        head.append(f"  {u.unit.part_number} ({u.unit.supplier or 'no supplier'}) lot {u.unit.lot}  ")
        head.append(u.life_words + "  ")
        head.append_text(verdict_text(u))
        if u.reasons:
            head.append(": " + "; ".join(u.reasons[:2]))
        lines = [head]
        broke = first_break_text(u.unit)
        if broke:
            lines.append(Text(broke))
        flagged = first_drift_text(u.unit)
        if flagged:
            lines.append(Text(flagged, style=DRIFT_STYLE))
        lines.append(grid)
        for d in u.drift:
            if d.signalled:
                lines.append(Text(self._drift_words(d), style=DRIFT_STYLE))
        from rich.console import Group

        info.update(Group(*lines))

    @staticmethod
    def _drift_words(d) -> str:
        text = (
            f"DRIFT {d.words}: {d.evidence or 'chart signal from cycle ' + cycles_text(d.first_signal_cycle)}"
        )
        text += f"; baseline {value_text(d.baseline)} ms"
        if d.past_limit:
            text += f", past the {value_text(d.limit)} ms limit since cycle {cycles_text(d.over_since)}"
        elif d.failed_at is not None:
            text += f"; failed at cycle {cycles_text(d.failed_at)}: no projection"
        elif d.crossing_cycle is not None:
            text += f", reaches the {value_text(d.limit)} ms limit near cycle {cycles_text(d.crossing_cycle)}"
            lo = cycles_text(d.crossing_low) if d.crossing_low is not None else "-"
            hi = cycles_text(d.crossing_high) if d.crossing_high is not None else "never"
            text += f" ({lo} to {hi})"
        return text

    # -- actions ------------------------------------------------------------------------------------
    def action_back(self) -> None:
        filt = self.query_one("#filter", Input)
        if filt.has_focus:  # close the filter box, keep the filter
            filt.display = bool(self.filter_text)
            self.query_one("#units", DataTable).focus()
            return
        if self.filter_text:  # then clear the filter
            self.filter_text = ""
            filt.value = ""
            filt.display = False
            self._fill()
            return
        self.app.pop_screen()

    def action_filter(self) -> None:
        filt = self.query_one("#filter", Input)
        filt.display = True
        filt.value = self.filter_text
        filt.focus()

    def on_input_changed(self, event: Input.Changed) -> None:
        self.filter_text = event.value.strip()
        self._fill()

    def on_input_submitted(self, _event: Input.Submitted) -> None:
        filt = self.query_one("#filter", Input)
        filt.display = bool(self.filter_text)
        self.query_one("#units", DataTable).focus()

    def action_sort(self) -> None:
        keys = list(SORTS)
        self.sort_key = keys[(keys.index(self.sort_key) + 1) % len(keys)]
        self._fill()

    def action_reverse(self) -> None:
        self.reverse = not self.reverse
        self._fill()

    def action_verdict(self) -> None:
        i = VERDICT_FILTERS.index(self.verdict_filter)
        self.verdict_filter = VERDICT_FILTERS[(i + 1) % len(VERDICT_FILTERS)]
        self._fill()

    def action_drift(self) -> None:
        self.drift_only = not self.drift_only
        self._fill()

    def on_data_table_row_selected(self, _event) -> None:
        u = self._selected()
        if u is not None:
            from ._history import HistoryScreen

            self.app.push_screen(HistoryScreen(u.unit.id))

    def action_population(self, kind: str) -> None:
        u = self._selected()
        if u is None:
            return
        from ._data import Group
        from ._population import PopulationScreen

        group = (
            Group("part", u.unit.part_id, u.unit.part_number)
            if kind == "part"
            else Group("lot", u.unit.lot_id, f"{u.unit.part_number}/{u.unit.lot}")
        )
        self.app.push_screen(PopulationScreen(group))


VERDICT_LABEL_SHORT = {FAIL: "FAIL", MARGINAL: "MARGINAL", PASS: "PASS"}
