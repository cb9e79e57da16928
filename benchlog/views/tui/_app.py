"""`BenchDashboard`: the Textual app behind `benchlog dash`."""

from __future__ import annotations

import asyncio
import signal

from textual.app import App
from textual.binding import Binding

from ._base import DataScreen
from ._runs import RunsScreen
from ._source import StoreSource


def _warm_up() -> None:
    """Import the drift charts' modules while the first screen is read, not on the first run."""
    import benchlog.analysis  # noqa: F401


class BenchDashboard(App):
    """The dashboard over the store at `db` (an URL or SQLite path), read-only.

    Reads run in thread workers about every `refresh_s` seconds. `show_timing=False` leaves read times
    out of the status line and `label` names the database there instead of its path (for fixed
    screenshots); `refresh_s=0` reads only on demand (opening a screen, `r`). `quit_on_signals` makes
    SIGTERM and SIGHUP quit the app as `q` does (the terminal is restored), for `benchlog dash`."""

    CSS_PATH = "_app.tcss"
    TITLE = "benchlog"
    BINDINGS = [
        Binding("q", "quit", "Quit"),
        Binding("question_mark", "help", "Help"),
        Binding("r", "refresh_now", "Read now", show=False),
    ]

    def __init__(
        self,
        db: str | None = None,
        *,
        refresh_s: float = 1.0,
        show_timing: bool = True,
        label: str | None = None,
        quit_on_signals: bool = False,
    ) -> None:
        super().__init__()
        self.quit_on_signals = quit_on_signals
        self._signals: dict[signal.Signals, object] = {}  # signal -> handler before the app
        self.source = StoreSource(db)
        if label is not None:
            self.source.shown = label
        self.refresh_s = refresh_s
        self.show_timing = show_timing

    def on_mount(self) -> None:
        if self.quit_on_signals:
            loop = asyncio.get_running_loop()
            for sig in (signal.SIGTERM, signal.SIGHUP):
                before = signal.getsignal(sig)
                if before is not signal.SIG_IGN:
                    loop.add_signal_handler(sig, self.exit)
                    self._signals[sig] = before
        self.run_worker(_warm_up, thread=True, group="warm-up", exit_on_error=False)
        self.push_screen(RunsScreen())
        if self.refresh_s > 0:
            self.set_interval(self.refresh_s, self.action_refresh_now)

    def action_refresh_now(self) -> None:
        if not self.screen_stack:  # the refresh timer can fire once more while the app closes
            return
        screen = self.screen
        if isinstance(screen, DataScreen):
            screen.request()

    def action_help(self) -> None:
        from ._help import HelpScreen

        if not isinstance(self.screen, HelpScreen):
            self.push_screen(HelpScreen())

    def on_unmount(self) -> None:
        loop = asyncio.get_running_loop()
        for sig, before in self._signals.items():
            loop.remove_signal_handler(sig)
            signal.signal(sig, before)  # the command's own handling again (asyncio leaves SIG_DFL)
        self._signals.clear()
        self.source.close()
