"""Stop signals: SIGTERM and SIGHUP end a command the way Ctrl-C does.

A lab runs `benchlog record` under a service manager (stopped with SIGTERM), in a terminal that may
close (SIGHUP), or from a script's background job (where the shell has set SIGINT to be ignored).
Every long-running command must end cleanly on each of them: flush what it has, end its run, remove
its port link.

- `raise_on_stop_signals()` (around every command, in `main`) makes SIGTERM and SIGHUP raise
  KeyboardInterrupt, so every command's existing Ctrl-C path is also its SIGTERM path.
- `stop_signals(event)` is for commands with a loop of their own (`record`, `sim`): the first signal
  sets `event` so the loop ends at its next turn; a second one raises KeyboardInterrupt (stop now).

A signal whose disposition was "ignore" when the process started stays ignored: `nohup benchlog
record ...` must survive its terminal closing, and a background job keeps ignoring Ctrl-C meant for
the foreground.
"""

from __future__ import annotations

import signal
import threading
from collections.abc import Iterator
from contextlib import contextmanager

__all__ = ["STOP_SIGNALS", "raise_on_stop_signals", "stop_signals"]

STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)


def _interrupt(_signum, _frame) -> None:
    raise KeyboardInterrupt


def _not_ignored(sig: signal.Signals) -> bool:
    return signal.getsignal(sig) is not signal.SIG_IGN


@contextmanager
def raise_on_stop_signals() -> Iterator[None]:
    """While inside: SIGTERM and SIGHUP raise KeyboardInterrupt in the main thread (unless ignored)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    old = {}
    for sig in (signal.SIGTERM, signal.SIGHUP):
        if _not_ignored(sig):
            old[sig] = signal.signal(sig, _interrupt)
    try:
        yield
    finally:
        for sig, handler in old.items():
            signal.signal(sig, handler)


@contextmanager
def stop_signals(event: threading.Event) -> Iterator[None]:
    """While inside: a stop signal sets `event`; the next one raises KeyboardInterrupt."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def _on_signal(_signum, _frame) -> None:
        if event.is_set():
            raise KeyboardInterrupt
        event.set()

    old = {sig: signal.signal(sig, _on_signal) for sig in STOP_SIGNALS if _not_ignored(sig)}
    try:
        yield
    finally:
        for sig, handler in old.items():
            signal.signal(sig, handler)
