"""Benches and runs: which are recording, how far they got, how fast, and what happened to the link."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.widgets import DataTable, Footer, Static

from ._base import DIM_STYLE, FAIL_STYLE, PASS_STYLE, DataScreen, StatusLine
from ._data import Overview, RunRow, cycles_text, duration_text, read_overview


def state_text(row: RunRow) -> Text:
    if row.state == "live":
        return Text("LIVE", style=PASS_STYLE)
    if row.state == "interrupted":
        return Text("INTERRUPTED", style="bold yellow")
    return Text("ENDED", style=DIM_STYLE)


def outage_text(row: RunRow) -> Text:
    o = row.outage
    if o is None:
        return Text("none", style=DIM_STYLE)
    many = f"{o.count}x, " if o.count > 1 else ""
    return Text(f"DOWN {many}{duration_text(o.longest_s)}", style=FAIL_STYLE)


class RunsScreen(DataScreen):
    """The first screen: every run, newest first."""

    CSS_PATH = "_runs.tcss"
    BINDINGS = [
        Binding("enter", "open_run", "Units", show=True),
        Binding("p", "population", "Populations"),
    ]

    def compose(self) -> ComposeResult:
        yield Static("benchlog dashboard  -  benches and runs", id="title")
        yield Static("", id="alert")
        table = DataTable(id="runs", cursor_type="row", zebra_stripes=True)
        yield table
        yield Static("", id="runs-key")
        yield Static("", id="run-info")
        yield StatusLine()
        yield Footer()

    WIDE = 100  # below this many columns, the run's pace and how it ended fold into the pane below

    def _columns(self, wide: bool) -> list[tuple[str, str]]:
        if wide:
            return [
                ("Run", "run"),
                ("Bench", "bench"),
                ("State", "state"),
                ("How", "how"),
                ("Cycles", "cycles"),
                ("Done", "pct"),
                ("c/s", "rate"),
                ("Left", "left"),
                ("Units", "units"),
                ("Inc", "inc"),
                ("Link", "link"),
            ]
        return [
            ("Run", "run"),
            ("Bench", "bench"),
            ("State", "state"),
            ("Cycles", "cycles"),
            ("Done", "pct"),
            ("Units", "units"),
            ("Inc", "inc"),
            ("Link", "link"),
        ]

    # the table's abbreviations, one line under it (at 80 columns for the narrow table)
    KEY_NARROW = "Done % of target  Inc incidents  Link: longest outage (DOWN nx: n outages)"
    KEY_WIDE = "Done % of target  c/s cycles/second  Left time to target  Inc incidents  Link: longest outage"

    def on_mount(self) -> None:
        self._wide: bool | None = None
        self._layout(self.size.width >= self.WIDE)
        self.request()

    def _layout(self, wide: bool) -> None:
        if wide == self._wide:
            return
        self._wide = wide
        t = self.query_one("#runs", DataTable)
        t.clear(columns=True)
        for label, key in self._columns(wide):
            t.add_column(label, key=key)
        key = self.KEY_WIDE if wide else self.KEY_NARROW
        self.query_one("#runs-key", Static).update(Text(key, style=DIM_STYLE))

    def on_resize(self, _event) -> None:
        if self._wide is not None and (self.size.width >= self.WIDE) != self._wide:
            self._layout(self.size.width >= self.WIDE)
            if isinstance(self.last_data, Overview):
                self.show(self.last_data)

    def load(self, store, params) -> Overview:
        return read_overview(store)

    def show(self, data: Overview) -> None:
        t = self.query_one("#runs", DataTable)
        keep = t.cursor_row
        t.clear()
        keys = [k for _, k in self._columns(bool(self._wide))]
        for row in data.runs:
            r = row.run
            target = cycles_text(r.target_cycles) if r.target_cycles else "open"
            pct = f"{100 * r.cycles_done / r.target_cycles:.0f}%" if r.target_cycles else "-"
            left = duration_text(r.eta_s) if row.state == "live" else "-"
            rate = f"{r.rate_cps:.1f}" if row.state == "live" else "-"
            failed = Text(f"{r.units_failed} fail", style=FAIL_STYLE) if r.units_failed else Text("")
            units = Text(f"{r.units} ").append_text(failed)
            cells = {
                "run": str(r.id),
                "bench": Text(r.bench),
                "state": state_text(row),
                "how": row.how,
                "cycles": f"{cycles_text(r.cycles_done)}/{target}",
                "pct": pct,
                "rate": rate,
                "left": left,
                "units": units,
                "inc": str(r.incidents),
                "link": outage_text(row),
            }
            t.add_row(*(cells[k] for k in keys), key=str(r.id))
        if data.runs:
            t.move_cursor(row=min(max(keep, 0), len(data.runs) - 1))
        alerts = [
            f"run {row.run.id} ({row.run.bench}): link down {row.outage.count}x, "
            f"longest {duration_text(row.outage.longest_s)}, total {duration_text(row.outage.total_s)}"
            for row in data.runs
            if row.outage is not None and row.state != "ended"
        ]
        alert = self.query_one("#alert", Static)
        if alerts:
            alert.update(Text("LINK OUTAGES  " + "; ".join(alerts), style=FAIL_STYLE))
        elif not data.runs:
            alert.update(Text("No runs recorded in this database yet.", style="bold yellow"))
        else:
            live = sum(1 for r in data.runs if r.state == "live")
            alert.update(Text(f"{len(data.runs)} runs on {data.benches} benches, {live} recording"))
        self._show_info()

    def _selected(self) -> RunRow | None:
        data = self.last_data
        if not isinstance(data, Overview) or not data.runs:
            return None
        t = self.query_one("#runs", DataTable)
        i = t.cursor_row
        return data.runs[i] if 0 <= i < len(data.runs) else None

    def on_data_table_row_highlighted(self, _event: DataTable.RowHighlighted) -> None:
        self._show_info()

    def _show_info(self) -> None:
        row = self._selected()
        info = self.query_one("#run-info", Static)
        if row is None:
            info.update("")
            return
        r = row.run
        prof = r.profile or {}
        lines = Text()
        lines.append(f"Run {r.id} on {r.bench}", style="bold")
        lines.append(f"  started {r.started_at:%Y-%m-%d %H:%M} UTC")
        if r.ended_at is not None:
            lines.append(f", ended {r.ended_at:%Y-%m-%d %H:%M} UTC: {row.how}")
            if r.end_detail:
                lines.append(f" ({r.end_detail})")
        elif row.state == "live":
            lines.append(f", {r.rate_cps:.1f} cycles/s, {duration_text(r.eta_s)} left")
        lines.append("\n")
        if prof:
            shown = ", ".join(f"{k} {v}" for k, v in list(prof.items())[:6])
            lines.append(f"profile: {shown}\n")
        if r.note:
            lines.append(f"note: {r.note}\n")
        if row.incident_kinds:
            kinds = ", ".join(f"{k.replace('_', ' ')} {n}" for k, n in sorted(row.incident_kinds.items()))
            lines.append(f"incidents: {kinds}\n")
        info.update(lines)

    def on_problem(self, problem) -> None:
        if problem is not None and problem.kind != "outage":
            self.query_one("#alert", Static).update(Text(problem.message, style="bold yellow"))

    def on_data_table_row_selected(self, _event: DataTable.RowSelected) -> None:
        self.action_open_run()

    def action_open_run(self) -> None:
        row = self._selected()
        if row is not None:
            from ._units import UnitsScreen

            self.app.push_screen(UnitsScreen(row.run.id))

    def action_population(self) -> None:
        from ._population import PopulationScreen

        self.app.push_screen(PopulationScreen())
