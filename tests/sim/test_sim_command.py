"""`benchlog sim` as a user runs it: prints its port, serves it, ends cleanly on Ctrl-C, on SIGTERM (a
service manager stopping it) and on SIGHUP (its terminal closing), also when started as a script's
background job, where SIGINT is ignored."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time

import pytest
import serial

from tests.conftest import HANG_S


@pytest.mark.parametrize(
    ("sigint", "stop_with"),
    [("default", signal.SIGINT), ("ignored", signal.SIGTERM), ("default", signal.SIGHUP)],
    ids=["ctrl-c", "sigterm-in-background-job", "sighup"],
)
def test_sim_serves_a_pty_until_stopped(children, sigint, stop_with):
    sim = children.benchlog("sim", "--preset", "wrap16", "--speed", "2", "--form", "packed", sigint=sigint)
    path = sim.wait_line(lambda line: line.startswith("/"))
    assert os.path.exists(path)
    sim.wait_line("# ")  # the banner comes after the port is served
    with serial.serial_for_url(path, timeout=0.2) as port:
        port.write(b"PING 321\n")
        got = b""
        end = time.monotonic() + HANG_S
        while b"\x00" not in got:
            got += port.read(256)
            assert time.monotonic() < end, "no packed frame from the simulator"
    sim.signal(stop_with)
    rc, out, err = sim.finish()
    assert rc == 0, err
    assert "# served" in out and err == ""
    assert not os.path.exists(path)  # the port link goes with the simulator


def test_sim_bad_option_is_one_line():
    r = subprocess.run(
        [sys.executable, "-m", "benchlog", "sim", "--preset", "no-such"], capture_output=True, text=True
    )
    assert r.returncode == 9 and r.stderr.count("\n") == 1 and "no-such" in r.stderr
