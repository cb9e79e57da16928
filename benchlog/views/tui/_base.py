"""What every dashboard screen shares: reads in a thread worker, one message per refresh, a status line."""

from __future__ import annotations

from rich.text import Text
from textual.message import Message
from textual.screen import Screen
from textual.widgets import Static

from ._data import duration_text
from ._source import Problem

# Explicit colours, not the terminal's sixteen: under the dashboard's theme ANSI magenta and red came
# out as one colour, so drift read as a failure. Each state is also written as a word.
PASS_STYLE = "bold #4ec94e"
MARGINAL_STYLE = "bold #e8c21a"
FAIL_STYLE = "bold #ff5050"
DRIFT_STYLE = "bold #a98bff"
DIM_STYLE = "dim"


class StatusLine(Static):
    """The bottom line: which database, whether it can be read, how long the last read took."""


class DataScreen(Screen):
    """A screen whose content comes from the store. `params()` (UI thread) captures what to read,
    `load(store, params)` (worker thread) reads it, `show(data)` (UI thread) puts it on screen."""

    class Loaded(Message):
        """One refresh's results, all at once."""

        def __init__(self, data: object) -> None:
            self.data = data
            super().__init__()

    def __init__(self) -> None:
        super().__init__()
        self._busy = False
        self._again = False
        self.loaded_once = False
        self.last_data: object | None = None
        self.problem: Problem | None = None

    # -- reading --------------------------------------------------------------------------------------
    def params(self) -> object:
        return None

    def load(self, store, params):  # pragma: no cover - overridden
        raise NotImplementedError

    def show(self, data) -> None:  # pragma: no cover - overridden
        raise NotImplementedError

    def is_stale(self, data) -> bool:
        """True when `data` answers an earlier question than the one on screen now (the user moved on
        while it was read): it is dropped, never shown, and the current question is read instead."""
        return False

    def request(self) -> None:
        """Start a read unless one is running (then run one more right after it)."""
        if self._busy:
            self._again = True
            return
        self._busy = True
        params = self.params()
        source = self.app.source

        def work() -> None:
            try:
                data = source.read(lambda store: self.load(store, params))
            except Exception as exc:  # noqa: BLE001 - shown on the status line; the next read retries
                data = Problem("error", f"internal error while reading: {type(exc).__name__}: {exc}", 0.0)
            self.post_message(self.Loaded(data))

        self.run_worker(work, thread=True, group="reads", exit_on_error=False)

    def on_screen_resume(self) -> None:
        self.request()

    def on_data_screen_loaded(self, message: DataScreen.Loaded) -> None:
        self._busy = False
        data = message.data
        if isinstance(data, Problem):
            self.problem = data
        elif self.is_stale(data):
            self._again = True
        else:
            self.problem = None
            self.last_data = data
            self.show(data)
            self.loaded_once = True
            if not getattr(data, "complete", True):
                self._again = True  # shown in part: read the rest right away
        self.update_status(getattr(data, "read_s", None))
        if self._again:
            self._again = False
            self.request()

    # -- status line ----------------------------------------------------------------------------------
    def update_status(self, read_s: float | None = None) -> None:
        try:
            line = self.query_one(StatusLine)
        except Exception:  # noqa: BLE001 - the screen is being torn down
            return
        src = self.app.source
        p = self.problem
        if p is None:
            text = Text(f" {src.shown}", style=DIM_STYLE)
            if read_s is not None and self.app.show_timing:
                text.append(f"  read {read_s * 1000:.0f} ms", style=DIM_STYLE)
            if src.reconnects and self.app.show_timing:
                text.append(f"  reconnected {src.reconnects}x", style=DIM_STYLE)
        elif p.kind == "outage":
            text = Text(" DATABASE UNREACHABLE ", style="bold reverse red")
            text.append(f" for {duration_text(p.duration_s())}, retrying each second; ")
            text.append("showing the last data read. " if self.loaded_once else "")
            text.append(p.message)
        else:
            text = Text(" NO DATA ", style="bold reverse yellow")
            text.append(" " + p.message)
        line.update(text)
        self.on_problem(p)

    def on_problem(self, problem: Problem | None) -> None:
        """Screens with a message area show the problem there too."""
