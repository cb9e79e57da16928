"""`benchlog watch` on a simulated sampler's pty: live lines, a started profile, totals at the end."""

from __future__ import annotations

import re

from benchlog.sim import PtySampler, parse_config
from benchlog.views.cli import main

CONFIG = """
[sampler]
board_id = "WATCH-TEST"
channels = 2

[populations.P]
supplier = "test"
operate = { median_us = 2000.0 }
release = { median_us = 1000.0 }
make = { count_mean = 2.0, first_gap_us = 100.0, dwell_us = 50.0 }
break = { count_mean = 1.0, first_gap_us = 100.0, dwell_us = 50.0 }
life_shape = 2.0
life_scale = 1.0e9
failure = { chatter = 1.0 }

[[units]]
channel = 0
population = "P"
serial = "W0"
"""


def test_watch_prints_edges_starts_a_profile_and_totals(capsys):
    with PtySampler(parse_config(CONFIG, "watch.toml"), speed=5.0) as sim:
        code = main(["watch", sim.path, "--speed", "5", "--profile", "20:20:10", "--on", "0", "--for", "1.5"])
        edges_sent = len(sim.bench.truth.sent)
    out = capsys.readouterr().out
    assert code == 0
    assert "# sampler WATCH-TEST" in out and "# cycling channels [0]" in out
    assert sim.commands_seen[-1] == b"HALT"  # the profile it started is stopped at the end
    assert sum(c.startswith(b"PLAN 0 20000 20000 10") for c in sim.commands_seen) == 1
    drive_on = re.findall(r"ch0 +drive on", out)
    assert len(drive_on) == 10
    edge_lines = re.findall(r"^ +\d+\.\d{6}  ch0 +(?:closed|open)$", out, re.M)
    totals = re.search(r"# totals: \d+ bytes, (\d+) edges, (\d+) drive switchings", out)
    assert totals and int(totals.group(1)) == len(edge_lines) == edges_sent and int(totals.group(2)) == 20


def test_watch_summary_and_bad_port(capsys, tmp_path):
    with PtySampler(parse_config(CONFIG, "watch.toml"), speed=5.0) as sim:
        code = main(["watch", sim.path, "--speed", "5", "--profile", "20:20:0", "--summary", "--for", "2.3"])
    out = capsys.readouterr().out
    assert code == 0
    assert re.search(r"^ +\d+\.\d{3}  \d+ edges, \d+ drives this second; total \d+ edges, 0 lost", out, re.M)
    assert main(["watch", str(tmp_path / "absent")]) == 4  # PortError's exit code
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "absent" in err
