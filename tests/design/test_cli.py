"""`benchlog debounce` and `benchlog pullup` end to end: an edge file, a capture of the simulated sampler's
bytes, and a real SQLite store."""

from __future__ import annotations

import json

import numpy as np
import pytest

from benchlog.analysis import measure
from benchlog.store import END_STOPPED, Store
from benchlog.views.cli import main

from ._bouncing import bouncing

MS = 1_000_000


@pytest.fixture(scope="module")
def edge_file(tmp_path_factory):
    e = bouncing(300, 40 * MS, np.log(0.5e6), 0.4, np.log(1e6), 0.3, seed=2)
    p = tmp_path_factory.mktemp("edges") / "edges.csv"
    rows = np.column_stack((e.t_ns, e.channel, e.level))
    np.savetxt(p, rows, fmt="%d", delimiter=",", header="t_ns,channel,level", comments="")
    return p


def test_edge_file_text_json_and_plots(edge_file, tmp_path, capsys):
    assert (
        main(
            [
                "debounce",
                "--edges",
                str(edge_file),
                "--sample-ms",
                "0.5",
                "--input",
                "HC-family Schmitt, 4.5",
                "--plot",
                str(tmp_path / "plots"),
            ]
        )
        == 0
    )
    text = capsys.readouterr().out
    assert "Recommended software debounce" in text and "RC filter before: HC-family Schmitt" in text
    for name in ("debounce-delay.png", "rc-node-voltage.png", "rc-tradeoff.png"):
        assert (tmp_path / "plots" / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (
        main(
            [
                "debounce",
                "--edges",
                str(edge_file),
                "--sample-ms",
                "0.5",
                "--json",
                "--kinds",
                "lockout",
                "--input",
                "HC-family Schmitt, 4.5",
                "--try",
                "0,470n",
            ]
        )
        == 0
    )
    out = json.loads(capsys.readouterr().out)
    choice = out["software"]["choices"]["lockout"]
    assert choice["point"]["false"] == 0 and choice["point"]["missed"] == 0
    assert out["rc"]["chosen"]["passes"] is True
    assert out["rc_tried"]["cap"] == pytest.approx(470e-9)


def test_capture_of_the_simulated_sampler(tmp_path, capsys):
    from benchlog.sim import Bench, load_preset
    from benchlog.wire._commands import Go, Plan

    bench = Bench(load_preset("demo"), seed=4)
    data = bench.encode(bench.start())
    data += bench.encode(bench.command(Plan(0, 50_000, 50_000, 0)))
    data += bench.encode(bench.command(Go()))
    for s in range(1, 21):
        data += bench.step_bytes(s * 1_000_000_000)
    cap = tmp_path / "capture.bin"
    cap.write_bytes(data)
    assert main(["debounce", "--capture", str(cap), "--json", "--life-windows", "2"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["recordings"] == ["channel 0"]
    assert out["software"]["actuations"] > 300  # 200 cycles of make + break
    for c in out["software"]["choices"].values():
        assert c["point"]["false"] == 0
    assert sum(w["actuations"] for w in out["software"]["life"]) == out["software"]["actuations"]
    assert out["software"]["life"][0]["choices"]["lockout"]["window_ms"] > 0


def test_store_units(tmp_path, capsys):
    db = tmp_path / "bench.sqlite"
    e = bouncing(200, 40 * MS, np.log(0.5e6), 0.4, np.log(1e6), 0.3, seed=6)
    acts = measure(e)
    with Store.open(str(db)) as store:
        part = store.register_part("AG-MS5", "Ashgrove Components")
        lot = store.register_lot(part, "L-01")
        unit = store.register_unit(lot, "AG-0001")
        bench = store.register_bench("bench A")
        w = store.start_run(bench, {0: unit}, profile={"on_ms": 20, "off_ms": 20})
        w.add(actuations=acts, edges=e)
        w.flush(final=True)
        w.close(END_STOPPED)
    assert main(["debounce", "--db", str(db), "--part", "AG-MS5", "--json", "--kinds", "stable"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["recordings"][0].startswith("unit AG-0001 run ")
    assert out["software"]["choices"]["stable"]["point"]["false"] == 0


@pytest.mark.parametrize(
    "argv",
    [
        ["debounce"],
        ["debounce", "--edges", "/nonexistent.csv"],
        ["debounce", "--edges", "x.csv", "--part", "AG-MS5"],
        ["debounce", "--edges", "{edges}", "--kinds", "magic"],
        ["debounce", "--edges", "{edges}", "--input", "no such input"],
        ["debounce", "--edges", "{edges}", "--input", "CMOS Schmitt", "--try", "1k"],
        ["debounce", "--edges", "{garbage}"],
        ["debounce", "--edges", "{edges}", "--input", "CMOS Schmitt", "--margin", "-1"],
        ["debounce", "--capture", "{garbage}"],
    ],
)
def test_bad_input_is_one_line(argv, edge_file, tmp_path, capsys):
    garbage = tmp_path / "garbage.csv"
    garbage.write_bytes(b"\x00\xff not numbers\n1,2\n")
    argv = [a.format(edges=edge_file, garbage=garbage) for a in argv]
    assert main(argv) != 0
    err = capsys.readouterr().err.strip()
    assert err.startswith("benchlog: error:") and "\n" not in err


def test_pullup_command(capsys):
    assert (
        main(
            [
                "pullup",
                "--open",
                "5",
                "--loaded",
                "2.5",
                "--resistor",
                "33k",
                "--meter-input",
                "inf",
                "--json",
            ]
        )
        == 0
    )
    out = json.loads(capsys.readouterr().out)
    assert out["pullup_ohms"] == pytest.approx(33e3)  # V open and V/2 across R: pull-up = R
    assert main(["pullup", "--open", "2", "--loaded", "3", "--resistor", "1k"]) != 0
    assert capsys.readouterr().err.startswith("benchlog: error:")


def _debounce_with_stderr_on(edge_file, stderr_fd):
    import os
    import subprocess
    import sys

    argv = [sys.executable, "-m", "benchlog", "debounce", "--edges", str(edge_file), "--sample-ms", "0.5"]
    env = {**os.environ, "COLUMNS": "80"}
    proc = subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=stderr_fd, env=env)
    try:
        out, err = proc.communicate(timeout=300)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    return proc.returncode, out, err


def test_progress_on_a_terminal_and_quiet_when_piped(edge_file):
    import os
    import pty
    import subprocess

    code, out, err = _debounce_with_stderr_on(edge_file, subprocess.PIPE)
    assert code == 0 and b"Recommended software debounce" in out and err == b""  # piped: not a byte
    leader, follower = pty.openpty()
    try:
        code, out, _ = _debounce_with_stderr_on(edge_file, follower)
        os.close(follower)
        follower = -1
        shown = b""
        while True:
            try:
                chunk = os.read(leader, 65536)
            except OSError:  # the terminal closed with the child: everything was read
                break
            if not chunk:
                break
            shown += chunk
    finally:
        if follower >= 0:
            os.close(follower)
        os.close(leader)
    assert code == 0 and b"Recommended software debounce" in out
    bars = [b for b in shown.split(b"\r") if b.startswith(b"debounce [")]
    assert bars and all(b"/6" in b for b in bars)  # a bar of six steps: reading, four debouncers, life
