"""The printed summary (`benchlog demo` without a terminal) reads every unit's trends, however slow the
store is: the dashboard's per-refresh time budgets (which leave a trend out for the next refresh) must not
reach a text printed once. On a loaded machine the demo printed "NO DATA" for a unit with 3,000 cycles
recorded, and "-/-" for three others."""

from __future__ import annotations

import threading

from benchlog.store import Store
from benchlog.views.tui._summary import summary_text
from tests.report.storefill import fill


class _SlowStore:
    """The real store, its trend reads made as slow as a busy disk or a remote server makes them
    (each 0.26 s: past the dashboard's 0.25 s first-read budget after one read)."""

    def __init__(self, store: Store) -> None:
        self._store = store
        self._pause = threading.Event()

    def trend(self, *args, **kwargs):
        self._pause.wait(0.26)  # a stand-in for slow storage, not a deadline: it never fails a test
        return self._store.trend(*args, **kwargs)

    def __getattr__(self, name):
        return getattr(self._store, name)


def test_a_slow_store_gives_the_same_summary(tmp_path):
    db = fill(tmp_path / "lab.sqlite", units_per_lot=2, recorded=40, test_end=4_000)
    with Store.open(db, readonly=True) as store:
        fast = summary_text(store)
        slow = summary_text(_SlowStore(store))
    assert "NO DATA" not in fast
    assert slow == fast
