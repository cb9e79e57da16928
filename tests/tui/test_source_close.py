"""The dashboard closing while a read still runs in its worker thread (Textual cannot stop a thread):
the read's database connection is closed as that read ends, never left for the garbage collector to
find later, in some other code (a psycopg connection collected open warns there)."""

from __future__ import annotations

import sqlite3
import threading

import pytest
from sqlalchemy import text

from benchlog.views.tui._source import StoreSource
from tests.conftest import HANG_S


def test_a_read_running_at_close_closes_its_connection_when_it_ends(built):
    path, _ = built
    source = StoreSource(path)
    inside, release = threading.Event(), threading.Event()
    raw: list = []

    def slow_read(store):
        with store.engine.connect() as conn:
            conn.execute(text("select 1"))
            raw.append(conn.connection.dbapi_connection)
            inside.set()
            assert release.wait(HANG_S)
        return "done"

    results: list = []
    worker = threading.Thread(target=lambda: results.append(source.read(slow_read)))
    worker.start()
    assert inside.wait(HANG_S)
    source.close()  # the app exits while the read runs
    release.set()
    worker.join(HANG_S)
    assert results == ["done"]
    with pytest.raises(sqlite3.ProgrammingError):  # closed: "Cannot operate on a closed database"
        raw[0].execute("select 1")
    # and a read after closing opens nothing
    problem = source.read(lambda store: "opened again")
    assert problem != "opened again" and source._store is None
