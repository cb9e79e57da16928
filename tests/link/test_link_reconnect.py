"""The link on real ports: a pseudo-terminal that goes away and comes back, and a TCP socket:// URL
whose server drops the connection. Nothing received before an outage is lost, and the outage is
reported in order between the chunks."""

from __future__ import annotations

import os
import socket
import threading
import time
import tty

import pytest

from benchlog.errors import PortError
from benchlog.link import Chunk, Link, Outage, list_ports
from tests.conftest import HANG_S, wait_until


def collect(link: Link, until, ceiling_s: float = HANG_S) -> list:
    """What the link delivers until `until(items)` holds (a ceiling only a hang reaches)."""
    items: list = []
    end = time.monotonic() + ceiling_s
    while not until(items):
        assert time.monotonic() < end, f"gave up after {ceiling_s:g} s; got {items!r:.300}"
        items += link.drain(0.05)
    return items


def data_of(items) -> bytes:
    return b"".join(i.data for i in items if isinstance(i, Chunk))


class Pty:
    """A pty whose slave is reached through a symbolic link (as /dev/serial/by-id/ names a board)."""

    def __init__(self, path: str) -> None:
        self.path = path
        self.master = self.slave = -1

    def plug(self) -> None:
        self.master, self.slave = os.openpty()
        tty.setraw(self.slave)
        tmp = self.path + ".tmp"
        os.symlink(os.ttyname(self.slave), tmp)
        os.replace(tmp, self.path)

    def pull(self) -> None:
        os.unlink(self.path)
        os.close(self.master)
        os.close(self.slave)


def test_port_that_never_appears_is_one_line_port_error(tmp_path):
    with pytest.raises(PortError) as info:
        Link(str(tmp_path / "no-such-port"), wait_s=0.2).open()
    assert "no-such-port" in str(info.value) and "\n" not in str(info.value)


def test_pulled_pty_loses_nothing_received_and_reports_the_outage(tmp_path):
    port = Pty(str(tmp_path / "port"))
    port.plug()
    with Link(port.path, backoff_s=(0.01, 0.05)) as link:
        before = bytes(range(256)) * 40
        os.write(port.master, before)
        got = collect(link, lambda items: len(data_of(items)) >= len(before))
        # nothing comes back from the sampler side yet; host commands reach it
        link.write(b"WHO\n")
        time.sleep(0.05)
        assert os.read(port.master, 100) == b"WHO\n"
        port.pull()
        wait_until(lambda: not link.connected, "the link to notice the pulled port")
        time.sleep(0.3)  # out for a while: reopening fails meanwhile
        with pytest.raises(PortError):
            link.write(b"PING 1\n")
        port.plug()
        got += collect(link, lambda items: any(isinstance(i, Outage) for i in items))
        after = b"after the outage\n"
        time.sleep(0.1)
        os.write(port.master, after)
        got += collect(link, lambda items: data_of(items).endswith(after))
    outages = [i for i in got if isinstance(i, Outage)]
    assert len(outages) == 1
    out = outages[0]
    assert 0.25e9 < out.host_end_ns - out.host_start_ns < HANG_S * 1e9 and out.attempts >= 2
    k = got.index(out)
    assert data_of(got[:k]) == before and data_of(got[k + 1 :]) == after
    assert all(a.host_ns <= b.host_ns for a, b in zip(got[:k], got[1:k], strict=False))
    port.pull()


def test_socket_url_reconnects_after_the_server_drops_it():
    server = socket.create_server(("127.0.0.1", 0))
    host, port = server.getsockname()
    sent = [b"first connection\n", b"second connection\n"]
    opened = threading.Semaphore(0)  # released each time the link has (re)opened the port

    def serve():
        for payload in sent:
            conn, _ = server.accept()
            # pyserial's open() discards what a socket already holds: send once the link says it is open
            opened.acquire(timeout=HANG_S)
            conn.sendall(payload)
            time.sleep(0.2)
            conn.close()

    thread = threading.Thread(target=serve, daemon=True)
    thread.start()
    with Link(f"socket://{host}:{port}", backoff_s=(0.01, 0.05), on_connect=opened.release) as link:
        got = collect(link, lambda items: data_of(items) == b"".join(sent))
    thread.join(HANG_S)
    server.close()
    outages = [i for i in got if isinstance(i, Outage)]
    assert data_of(got) == b"".join(sent)
    assert len(outages) >= 1
    k = got.index(outages[0])
    assert data_of(got[:k]) == sent[0]


def test_list_ports_returns_port_info():
    for p in list_ports():
        assert p.device
