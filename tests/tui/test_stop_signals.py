"""Every long-running command ends cleanly on SIGTERM (a service manager stopping it) and SIGHUP (its
terminal closing), as on Ctrl-C, also when started as a script's background job (SIGINT ignored).
`sim` and `record` are covered beside their own tests; here `watch`, `dash` (a real Textual app on a
real pseudo-terminal) and `demo`."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import threading

import pytest

from benchlog.store import Store
from tests.conftest import _TRAMPOLINE, HANG_S, wait_until


def test_watch_prints_its_totals_on_sigterm(children):
    sim = children.benchlog("sim", "--preset", "wrap16", "--speed", "2")
    path = sim.wait_line(lambda line: line.startswith("/"))
    watch = children.benchlog("watch", path, sigint="ignored")
    watch.wait_line("# sampler")  # the announcement came through: it is reading
    watch.signal(signal.SIGTERM)
    rc, out, err = watch.finish()
    assert rc == 0, err
    assert "# totals:" in out and "Traceback" not in err


class _Terminal:
    """A command on a real pseudo-terminal (so Textual draws), its screen bytes collected."""

    def __init__(self, argv: list[str], env: dict[str, str]) -> None:
        self.master, slave = os.openpty()
        os.set_inheritable(slave, True)
        argv = [sys.executable, "-c", _TRAMPOLINE, "default", *argv]  # as a terminal starts it
        self.proc = subprocess.Popen(
            argv, stdin=slave, stdout=slave, stderr=slave, env=env, start_new_session=True, close_fds=True
        )
        os.close(slave)
        self.screen = bytearray()
        self._lock = threading.Lock()
        self._reader = threading.Thread(target=self._read, daemon=True)
        self._reader.start()

    def _read(self) -> None:
        while True:
            try:
                data = os.read(self.master, 65536)
            except OSError:  # EIO: the other side closed
                return
            if not data:
                return
            with self._lock:
                self.screen += data

    def shown(self) -> bytes:
        with self._lock:
            return bytes(self.screen)

    def close(self) -> None:
        try:
            os.killpg(self.proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        self.proc.wait(HANG_S)
        self._reader.join(10)
        os.close(self.master)


@pytest.fixture
def terminal():
    opened: list[_Terminal] = []

    def start(*args: str) -> _Terminal:
        env = {k: v for k, v in os.environ.items() if k != "BENCHLOG_DEBUG"}
        env.update(TERM="xterm-256color", COLUMNS="100", LINES="30")
        t = _Terminal([sys.executable, "-m", "benchlog", *args], env)
        opened.append(t)
        return t

    yield start
    for t in opened:
        t.close()


@pytest.mark.parametrize("stop_with", [signal.SIGTERM, signal.SIGHUP], ids=["sigterm", "sighup"])
def test_dash_on_a_terminal_quits_and_restores_it(built, terminal, stop_with):
    path, _ = built
    t = terminal("dash", "--db", path)
    wait_until(lambda: b"bench-1" in t.shown(), "the dashboard to draw its runs")
    t.proc.send_signal(stop_with)
    assert t.proc.wait(HANG_S) == 0
    # Textual leaves the alternate screen on a clean exit: the user's terminal is usable again
    wait_until(lambda: b"\x1b[?1049l" in t.shown(), "the terminal to be restored")


def test_demo_stops_recording_on_sigterm_and_keeps_what_it_recorded(tmp_path, children):
    db = tmp_path / "demo.sqlite"
    demo = children.benchlog("demo", "--db", str(db), "--no-dash", "--cycles", "200000", sigint="ignored")
    demo.wait_line("recording into", stream="stderr")

    def cycles() -> int:
        try:
            with Store.open(str(db), readonly=True) as s:
                return sum(r.cycles_done for r in s.runs())
        except Exception:  # not created yet
            return 0

    wait_until(lambda: cycles() >= 20, "the demo to record 20 cycles")
    demo.signal(signal.SIGTERM)
    rc, out, err = demo.finish()
    assert rc == 0, err
    assert "Traceback" not in err
    with Store.open(str(db), readonly=True) as s:
        (run,) = s.runs()
        assert run.end_reason == "stopped" and run.cycles_done >= 20
