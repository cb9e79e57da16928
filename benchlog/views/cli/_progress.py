"""Progress of a long command on standard error: a bar where the total is known, a counter where it is
not; nothing at all when standard error is not a terminal (piped, redirected, under a scheduler)."""

from __future__ import annotations

import sys
import time
from typing import TextIO

WIDTH = 24


class Progress:
    def __init__(self, what: str, total: int | None = None, stream: TextIO | None = None) -> None:
        self.what = what
        self.total = total
        self.stream = stream if stream is not None else sys.stderr
        self.shown = bool(getattr(self.stream, "isatty", lambda: False)())
        self.done = 0
        self._last = 0.0
        self._drawn = False

    def step(self, note: str = "", by: int = 1) -> None:
        self.done += by
        self.draw(note)

    def draw(self, note: str = "", force: bool = False) -> None:
        if not self.shown:
            return
        now = time.monotonic()
        if not force and now - self._last < 0.1:
            return
        self._last = now
        if self.total:
            filled = round(WIDTH * min(self.done, self.total) / self.total)
            bar = "#" * filled + "." * (WIDTH - filled)
            line = f"{self.what} [{bar}] {self.done}/{self.total}"
        else:
            line = f"{self.what}: {self.done}"
        line = f"{line} {note}".rstrip()[:79]
        self.stream.write("\r" + line.ljust(79))
        self.stream.flush()
        self._drawn = True

    def close(self) -> None:
        if self._drawn:
            self.stream.write("\r" + " " * 79 + "\r")
            self.stream.flush()
            self._drawn = False
