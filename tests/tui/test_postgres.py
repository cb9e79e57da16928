"""The dashboard on a real PostgreSQL server whose connection goes away and comes back.

The server is shared, so it is not restarted: the dashboard reaches it through a small TCP relay in
the test, and cutting the relay (every open connection dropped, new ones refused) is what a server
restart looks like from the client's side.
"""

from __future__ import annotations

import gc
import socket
import threading
import uuid

import pytest
from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url
from textual.widgets import DataTable

from benchlog.views.tui import BenchDashboard
from benchlog.views.tui._runs import RunsScreen
from benchlog.views.tui._source import Problem, StoreSource
from tests.conftest import need_postgres_url

from ._build import build
from ._pilot import settle, until

pytestmark = pytest.mark.postgres


class Relay:
    """Forwards 127.0.0.1:<port> to the server; `cut()` drops everything, `restore()` listens again."""

    def __init__(self, host: str, port: int) -> None:
        self.target = (host, port)
        self.port = 0
        self._conns: list[socket.socket] = []
        self._lock = threading.Lock()
        self._listener: socket.socket | None = None
        self.restore()

    def restore(self) -> None:
        s = socket.socket()
        s.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        s.bind(("127.0.0.1", self.port))
        s.listen(16)
        self.port = s.getsockname()[1]
        self._listener = s
        threading.Thread(target=self._accept, args=(s,), daemon=True).start()

    def _accept(self, listener: socket.socket) -> None:
        while True:
            try:
                client, _ = listener.accept()
            except OSError:
                return
            try:
                server = socket.create_connection(self.target)
            except OSError:
                client.close()
                continue
            with self._lock:
                self._conns += [client, server]
            for a, b in ((client, server), (server, client)):
                threading.Thread(target=self._pipe, args=(a, b), daemon=True).start()

    @staticmethod
    def _pipe(src: socket.socket, dst: socket.socket) -> None:
        try:
            while data := src.recv(65536):
                dst.sendall(data)
        except OSError:
            pass
        finally:
            for s in (src, dst):
                try:
                    s.shutdown(socket.SHUT_RDWR)
                except OSError:
                    pass

    def cut(self) -> None:
        if self._listener is not None:
            try:
                self._listener.shutdown(socket.SHUT_RDWR)  # wakes the accept() of the relay thread
            except OSError:
                pass
            self._listener.close()
            self._listener = None
        with self._lock:
            conns, self._conns = self._conns, []
        for s in conns:
            try:
                s.shutdown(socket.SHUT_RDWR)
            except OSError:
                pass
            s.close()


@pytest.fixture
def pg_schema():
    base = need_postgres_url()
    schema = "t_" + uuid.uuid4().hex[:12]
    admin = create_engine(base)
    with admin.begin() as c:
        c.execute(text(f'CREATE SCHEMA "{schema}"'))
    try:
        yield base, schema
    finally:
        gc.collect()  # a connection the test left open warns here, in its own test
        with admin.begin() as c:
            c.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
        admin.dispose()


def _with_schema(url: str, schema: str) -> str:
    return f"{url}{'&' if '?' in url else '?'}options=-csearch_path%3D{schema}"


async def test_server_outage_is_shown_and_survived(pg_schema):
    base, schema = pg_schema
    build(_with_schema(base, schema), cycles=500)
    u = make_url(base)
    relay = Relay(u.host or "127.0.0.1", u.port or 5432)
    via = _with_schema(u.set(port=relay.port).render_as_string(hide_password=False), schema)
    app = BenchDashboard(via, refresh_s=0.1)
    async with app.run_test(size=(100, 30)) as pilot:
        scr = await settle(pilot, RunsScreen)
        table = scr.query_one("#runs", DataTable)
        assert table.row_count == 2 and scr.problem is None
        relay.cut()
        await until(pilot, lambda: scr.problem is not None, "the outage to be shown")
        assert scr.problem is not None and scr.problem.kind == "outage"
        assert table.row_count == 2  # the last data read stays on screen
        line = scr.query_one("StatusLine").render()
        assert "DATABASE UNREACHABLE" in str(line)
        relay.restore()
        await until(pilot, lambda: scr.problem is None, "the dashboard to reconnect")
        assert scr.problem is None and table.row_count == 2
        assert app.source.reconnects >= 1
    relay.cut()


def test_a_server_gone_while_the_store_reopens_is_an_outage_not_a_wrong_database(pg_schema):
    # the first read after the cut fails on the live connection and drops the store; the next one
    # reopens it and cannot connect at all. That second failure was shown as "not a current benchlog
    # database" (kind no_schema): a loaded CI run caught the dashboard test in that second read.
    base, schema = pg_schema
    build(_with_schema(base, schema), cycles=100)
    u = make_url(base)
    relay = Relay(u.host or "127.0.0.1", u.port or 5432)
    source = StoreSource(_with_schema(u.set(port=relay.port).render_as_string(hide_password=False), schema))
    try:
        assert source.read(lambda store: len(store.runs())) == 2
        relay.cut()
        kinds = []
        for _ in range(3):
            got = source.read(lambda store: len(store.runs()))
            assert isinstance(got, Problem), got
            kinds.append(got.kind)
        assert kinds == ["outage"] * 3
        relay.restore()
        assert source.read(lambda store: len(store.runs())) == 2
        assert source.reconnects == 1
    finally:
        source.close()
        relay.cut()
