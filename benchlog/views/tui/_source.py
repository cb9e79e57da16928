"""The dashboard's data source: a read-only store that is reopened after an outage.

Every read runs in a worker thread. A read that fails (the file was replaced or removed, the
PostgreSQL server restarted) drops the store and records the outage; the next read opens it again.
The source never raises to the screens: they get a `Problem` to show instead of data.

Closing (the app exits) may find a read still running in its thread, which Textual cannot stop: the
store is then closed by that read as it ends, so no database connection outlives the dashboard.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass
from pathlib import Path

from benchlog.errors import BenchlogError, DataError, StoreUnreachable
from benchlog.store import Store, resolve_url


@dataclass(frozen=True, slots=True)
class Problem:
    """Why there is nothing (or nothing fresh) to show, in words for the status line."""

    kind: str  # "missing" | "no_schema" | "outage" | "data" | "error"
    message: str
    since_s: float  # monotonic time the problem started

    def duration_s(self, now: float | None = None) -> float:
        return max(0.0, (time.monotonic() if now is None else now) - self.since_s)


class StoreSource:
    """Opens `db` read-only on demand; `read(fn)` calls `fn(store)` or returns a Problem."""

    def __init__(self, db: str | None) -> None:
        self.url = resolve_url(db)
        self.shown = self._show(self.url)
        self._store: Store | None = None
        self._lock = threading.Lock()
        self.problem: Problem | None = None
        self.reconnects = 0
        self._reading = 0  # reads under way (worker threads)
        self._closed = False

    @staticmethod
    def _show(url: str) -> str:
        if url.startswith("sqlite:///"):
            return url[len("sqlite:///") :]
        from sqlalchemy.engine import make_url

        return make_url(url).render_as_string(hide_password=True)

    def _open(self) -> Store:
        with self._lock:
            if self._closed:
                raise BenchlogError("the dashboard is closing")
            if self._store is None:
                self._store = Store.open(self.url, readonly=True, inert_names=True)
                if self.problem is not None:
                    self.reconnects += 1
            return self._store

    def _drop(self) -> None:
        with self._lock:
            store, self._store = self._store, None
        if store is not None:
            try:
                store.close()
            except Exception:  # noqa: BLE001 - a broken engine may fail to dispose; it is dropped anyway
                pass

    def _fail(self, exc: BenchlogError) -> Problem:
        text = str(exc)
        if "no database at" in text:
            kind = "missing"
            message = (
                f"No benchlog database at {self.shown} yet. Record a run with `benchlog record`, "
                "or try `benchlog demo`."
            )
        elif isinstance(exc, StoreUnreachable):
            kind = "outage"
            message = f"Cannot reach {self.shown}: {text}"
        elif "schema" in text or "revision" in text:
            kind = "no_schema"
            message = f"Not a current benchlog database: {text}"
        else:
            kind = "outage"
            message = f"Cannot read {self.shown}: {text}"
        since = self.problem.since_s if self.problem is not None else time.monotonic()
        self.problem = Problem(kind, message, since)
        return self.problem

    def read(self, fn):
        """`fn(store)`, or a Problem when the database cannot be opened or read."""
        with self._lock:
            self._reading += 1
        try:
            return self._read(fn)
        finally:
            with self._lock:
                self._reading -= 1
                last_after_close = self._closed and self._reading == 0
            if last_after_close:
                self._drop()

    def _read(self, fn):
        try:
            store = self._open()
        except BenchlogError as exc:
            self._drop()
            return self._fail(exc)
        try:
            out = fn(store)
        except DataError as exc:  # the data asked for is not there (e.g. a run of a replaced file)
            self.problem = None
            return Problem("data", str(exc), time.monotonic())
        except BenchlogError as exc:
            self._drop()
            if not _exists(self.url):
                return self._fail(BenchlogError(f"no database at {self.shown}"))
            return self._fail(exc)
        self.problem = None
        return out

    def close(self) -> None:
        """Close the store now, or (a read still running) as soon as the last read ends."""
        with self._lock:
            self._closed = True
            busy = self._reading > 0
        if not busy:
            self._drop()


def _exists(url: str) -> bool:
    if url.startswith("sqlite:///"):
        return Path(url[len("sqlite:///") :]).exists()
    return True
