"""`benchlog sim` as a user runs it: prints its port, serves it, ends cleanly on Ctrl-C."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time

import serial


def test_sim_serves_a_pty_until_interrupted():
    proc = subprocess.Popen(
        [sys.executable, "-m", "benchlog", "sim", "--preset", "wrap16", "--speed", "2", "--form", "packed"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=True,
    )
    try:
        path = proc.stdout.readline().strip()
        assert os.path.exists(path)
        with serial.serial_for_url(path, timeout=0.2) as port:
            port.write(b"PING 321\n")
            got = b""
            end = time.monotonic() + 3
            while time.monotonic() < end and b"\x00" not in got:
                got += port.read(256)
        assert b"\x00" in got  # packed frames
        os.killpg(proc.pid, signal.SIGINT)
        out, err = proc.communicate(timeout=10)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, err
    assert "# served" in out and err == ""
    assert not os.path.exists(path)  # the port link goes with the simulator


def test_sim_bad_option_is_one_line():
    r = subprocess.run(
        [sys.executable, "-m", "benchlog", "sim", "--preset", "no-such"], capture_output=True, text=True
    )
    assert r.returncode == 9 and r.stderr.count("\n") == 1 and "no-such" in r.stderr
