"""One unit's history: a metric's trend over its life, limit and drift baseline, and a histogram."""

from __future__ import annotations

import numpy as np
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.widgets import Footer, Static

from benchlog.views._times import failure_time_text, first_drift_text

from ._base import DIM_STYLE, DRIFT_STYLE, DataScreen, StatusLine
from ._data import CHART_METRICS, History, cycles_text, read_history, value_text
from ._plots import Level, Series, histogram, histogram_legend, legend, trend_chart

METRIC_KEYS = list(CHART_METRICS)


class _Chart(Static):
    """A chart drawn for its own size: drawn again when that changes. The layout may settle after the
    data is shown (the drift line above it appears, the histogram gives up rows), and a chart left at
    the size it was first drawn for stays wrong until the terminal is resized."""

    drawn_for: tuple[int, int] | None = None

    def on_resize(self, _event) -> None:
        scr = self.screen
        if isinstance(scr, HistoryScreen) and isinstance(scr.last_data, History):
            if self.drawn_for != (self.size.width, self.size.height):
                scr.show(scr.last_data)


class HistoryScreen(DataScreen):
    CSS_PATH = "_history.tcss"
    BINDINGS = [
        Binding("escape", "back", "Back"),
        Binding("m", "metric(1)", "Metric"),
        Binding("M", "metric(-1)", "Prev metric", show=False),
        Binding("left_square_bracket", "span(-1)", "Earlier"),
        Binding("right_square_bracket", "span(1)", "Later"),
        Binding("minus", "zoom(0.5)", "Narrower"),
        Binding("plus", "zoom(2)", "Wider"),
        Binding("e", "latest", "Latest"),
    ]

    def __init__(self, unit_id: int, metric: str = "make_bounce", span_cycles: int = 1000) -> None:
        super().__init__()
        self.unit_id = unit_id
        self.metric = metric
        self.span_cycles = span_cycles
        self.span: tuple[int, int] | None = None  # None: follow the latest cycles

    def compose(self) -> ComposeResult:
        yield Static(f"Unit {self.unit_id}", id="unit-line")
        yield Static("", id="unit-when")
        yield Static("", id="chart-title")
        yield _Chart("", id="trend")
        yield Static("", id="legend")
        yield Static("", id="hist-title")
        yield _Chart("", id="hist")
        yield Static("", id="hist-key")
        yield StatusLine()
        yield Footer()

    def on_mount(self) -> None:
        self._fit()
        self.request()

    def _fit(self) -> None:
        """On a short terminal (24 lines) the histogram gives up two lines so the trend keeps its room."""
        tall = self.size.height >= 30 or self.size.height == 0
        self.query_one("#hist", Static).styles.height = 8 if tall else 6

    def params(self):
        return (self.unit_id, self.metric, self.span, self.span_cycles)

    def load(self, store, params) -> History:
        unit_id, metric, span, span_cycles = params
        return read_history(store, unit_id, metric, span, span_cycles)

    def on_resize(self, _event) -> None:
        self._fit()
        if isinstance(self.last_data, History):
            self.show(self.last_data)

    def show(self, data: History) -> None:
        u = data.unit
        words = CHART_METRICS[data.metric][0]
        head = Text(f"{u.serial}", style="bold")
        head.append(f"  {u.part_number} lot {u.lot}  {u.status.upper()}")
        if u.failed_at_cycle is not None:
            head.append(f" at {cycles_text(u.failed_at_cycle)} ({(u.failure_mode or '').replace('_', ' ')})")
            head.append(f" {failure_time_text(u)}")
        head.append(f"  {cycles_text(u.cycles)} cycles")
        self.query_one("#unit-line", Static).update(head)
        when = self.query_one("#unit-when", Static)
        flagged = first_drift_text(u)
        when.display = flagged is not None
        when.update(Text(flagged or "", style=DRIFT_STYLE))
        count = "count" in data.metric or data.metric.startswith("chatter")
        div = 1.0 if count else 1000.0
        unit = "" if count else " ms"
        t = data.trend
        mid = (t.cycle_lo + t.cycle_hi) / 2.0
        series = [
            Series("p50", mid, t.p50, ".", "green"),
            Series("p95", mid, t.p95, "+", "yellow"),
            Series("max", mid, t.max, "x", "red"),
        ]
        levels = []
        if data.limit is not None:
            levels.append(
                Level(f"limit {value_text(data.limit, data.metric)}{unit}", data.limit, "=", "bold red")
            )
        if data.flag is not None:
            levels.append(
                Level(
                    f"baseline {value_text(data.flag.baseline, data.metric)}{unit}",
                    data.flag.baseline,
                    "-",
                    "blue",
                )
            )
        marks = None
        if len(data.signal_cycles):
            ends = t.cycle_hi + 1
            pick = np.isin(ends, data.signal_cycles)
            if not pick.any():  # coarsened windows: mark at the signalled cycles on the p95 line
                idx = np.clip(np.searchsorted(ends, data.signal_cycles), 0, len(ends) - 1)
                pick = np.zeros(len(ends), bool)
                pick[idx] = True
            marks = Series("EWMA/CUSUM signal", mid[pick], t.p95[pick], "@", DRIFT_STYLE)
        title = Text(
            f"{words}{unit and f' ({unit.strip()})'} per {self._window(t)}-cycle window", style="bold"
        )
        if data.flag is not None and data.flag.signalled:
            title.append("  DRIFT", style=DRIFT_STYLE)
            title.append(f" from {cycles_text(data.flag.first_signal_cycle)}")
            if data.flag.past_limit:
                title.append(f", past limit since {cycles_text(data.flag.over_since)}")
            elif data.flag.failed_at is not None:
                title.append(f", failed at {cycles_text(data.flag.failed_at)}")
            elif data.flag.crossing_cycle is not None:
                title.append(f", limit reached near {cycles_text(data.flag.crossing_cycle)}")
        elif data.flag is not None:
            title.append("  steady", style=DIM_STYLE)
        self.query_one("#chart-title", Static).update(title)
        trend = self.query_one("#trend", _Chart)
        width = max(40, (trend.size.width or self.size.width) - 1)
        height = max(6, trend.size.height or 12)
        trend.drawn_for = (trend.size.width, trend.size.height)
        trend.update(trend_chart(series, levels, marks, width, height, div))
        self.query_one("#legend", Static).update(legend(series, levels, marks))
        v = data.values
        lo, hi = data.span
        ht = Text(f"{words}, cycles {lo:,}-{hi:,}: ", style="bold")
        if len(v):
            over = int((v > data.limit).sum()) if data.limit is not None else 0
            ht.append(
                f"n {len(v):,}  p50 {value_text(float(np.percentile(v, 50)), data.metric)}"
                f"  p95 {value_text(float(np.percentile(v, 95)), data.metric)}"
                f"  max {value_text(float(v.max()), data.metric)}{unit}"
            )
            if data.limit is not None:
                ht.append(f"  over {over}", style="bold red" if over else "")
        else:
            ht.append("no actuations in this span", style=DIM_STYLE)
        self.query_one("#hist-title", Static).update(ht)
        hist = self.query_one("#hist", _Chart)
        hist.drawn_for = (hist.size.width, hist.size.height)
        hist.update(
            histogram(
                v,
                max(40, (hist.size.width or self.size.width) - 1),
                max(4, hist.size.height or 8),
                data.limit,
                div,
                unit,
            )
        )
        self.query_one("#hist-key", Static).update(histogram_legend(data.limit if len(v) else None))

    @staticmethod
    def _window(t) -> str:
        if not len(t):
            return "?"
        return f"{int(np.median(t.cycle_hi - t.cycle_lo + 1)):,}"

    # -- actions ------------------------------------------------------------------------------------
    def action_back(self) -> None:
        self.app.pop_screen()

    def action_metric(self, step: int) -> None:
        i = METRIC_KEYS.index(self.metric)
        self.metric = METRIC_KEYS[(i + step) % len(METRIC_KEYS)]
        self.request()

    def _current_span(self) -> tuple[int, int] | None:
        if self.span is not None:
            return self.span
        if isinstance(self.last_data, History):
            return self.last_data.span
        return None

    def action_span(self, step: int) -> None:
        cur = self._current_span()
        if cur is None:
            return
        lo = max(0, cur[0] + step * self.span_cycles)
        last = int(self.last_data.trend.cycle_hi.max()) if len(self.last_data.trend) else 0
        if step > 0 and lo + self.span_cycles - 1 >= last:
            self.span = None  # back to following the latest cycles
        else:
            self.span = (lo, lo + self.span_cycles - 1)
        self.request()

    def action_zoom(self, factor: float) -> None:
        self.span_cycles = int(min(1_000_000, max(100, self.span_cycles * factor)))
        cur = self._current_span()
        if self.span is not None and cur is not None:
            self.span = (cur[0], cur[0] + self.span_cycles - 1)
        self.request()

    def action_latest(self) -> None:
        self.span = None
        self.request()
