"""`benchlog analyze` on recordings made by the simulated sampler, in both wire forms."""

from __future__ import annotations

import json

import numpy as np
import pytest

from benchlog.errors import DataError
from benchlog.sim import Bench, load_preset
from benchlog.views.cli import main
from benchlog.wire import Go, Plan

S = 1_000_000_000


def record(tmp_path, preset="demo", seconds=3.0, form=None):
    cfg = load_preset(preset)
    if form:
        cfg = cfg.with_sampler(form=form)
    bench = Bench(cfg, 5)
    recs = bench.advance_to(0)
    for ch in bench.units:
        recs += bench.command(Plan(ch, 50_000, 50_000, 0))
    recs += bench.command(Go())
    data = bench.encode(recs)
    t = 0
    while t < seconds * S:
        t += S // 4
        data += bench.encode(bench.advance_to(t))
    path = tmp_path / f"{preset}-{form or 'default'}.rec"
    path.write_bytes(data)
    return bench, path


@pytest.mark.parametrize("form", ["line", "packed"])
def test_json_summary_counts_match_the_simulator(tmp_path, capsys, form):
    bench, path = record(tmp_path, form=form)
    assert main(["analyze", str(path), "--spec", "AG-MS5", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    truth = bench.truth.actuations
    truth = truth[truth["t_drive_ns"] < 3 * S]  # the simulator may have planned cycles it never sent
    assert doc["part"] == "AG-MS5" and doc["decode"]["faults"] == 0
    for ch in doc["channels"]:
        t = truth[truth["channel"] == ch["channel"]]
        assert ch["makes"] == int((t["kind"] == 0).sum()) and ch["breaks"] == int((t["kind"] == 1).sum())
        done = t[t["t_settle_ns"] < t["t_drive_ns"].max()]  # the last one is cut short by the end of data
        want = float(np.percentile(done["bounce_us"][done["kind"] == 0], 95))
        assert ch["make_bounce_us"]["p95"] == pytest.approx(want, abs=3.0)
        assert ch["verdict"] in ("pass", "marginal", "fail") and ch["reason"]


def test_table_output_and_a_counter_that_wraps(tmp_path, capsys):
    _, path = record(tmp_path, preset="wrap16", seconds=2.0)
    assert main(["analyze", str(path), "--settle-ms", "5"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert "edges" in out[0] and out[2].split()[:3] == ["ch", "cycles", "makes"]
    assert len(out) == 3 + 4  # four channels on the wrap16 bench


def test_garbage_file_is_a_one_line_error(tmp_path, capsys):
    path = tmp_path / "noise.bin"
    path.write_bytes(bytes(np.random.default_rng(0).integers(0, 256, 5000, dtype=np.uint8)))
    assert main(["analyze", str(path)]) == DataError.exit_code
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "no sampler records" in err


def test_missing_file_and_bad_option_are_one_line(tmp_path, capsys):
    assert main(["analyze", str(tmp_path / "absent.rec")]) != 0
    assert capsys.readouterr().err.count("\n") == 1
    with pytest.raises(SystemExit):
        main(["analyze", "x", "--settle-ms", "-3"])
    assert "must be > 0" in capsys.readouterr().err


def test_settings_file_sets_wiring(tmp_path, capsys):
    _, path = record(tmp_path, seconds=1.0)
    conf = tmp_path / "bench.toml"
    conf.write_text("settle_ms = 4\nnormally_closed = [3]\n")
    assert main(["analyze", str(path), "--settings", str(conf), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["settings"]["settle_ms"] == 4.0
    ch3 = next(c for c in doc["channels"] if c["channel"] == 3)
    # a normally-open switch analysed as normally closed: every drive finds it already "there"
    assert ch3["make_bounce_us"]["n"] == 0 and ch3["no_change"] == ch3["actuations"]
    assert next(c for c in doc["channels"] if c["channel"] == 2)["make_bounce_us"]["n"] > 0
    conf.write_text("settle = 4\n")
    assert main(["analyze", str(path), "--settings", str(conf)]) != 0
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "settle: unknown key" in err


def test_hand_typed_line_form_measured_by_hand(tmp_path, capsys):
    # A minimal port's output (no checksums), ticks in us (hex):
    # drive on at 0x1000 = 4096 us; make at 0x2388 = 9096 us (operate 5000 us); reopens 0x2400-0x2500,
    # settles at 9472 us (bounce 376 us); drive off at 0xF424 = 62500 us, break at 0x10000 = 65536 us
    # (release 3036 us); drive on at 0x186A0 = 100000 us and no edge after it: stuck open.
    path = tmp_path / "hand.txt"
    path.write_text(
        "A 1 1000000 32 8 HANDMADE\nB 0 0 0\nD 0 1 1000\nE 0 1 2388\nE 0 0 2400\nE 0 1 2500\n"
        "B c350 3 0\nD 0 0 F424\nE 0 0 10000\nB 186a0 4 0\nD 0 1 186a0\nB 30d40 4 0\n"
    )
    assert main(["analyze", str(path), "--settle-ms", "2", "--json"]) == 0
    ch = json.loads(capsys.readouterr().out)["channels"][0]
    assert ch["operate_us"]["max"] == 5000.0 and ch["make_bounce_us"]["max"] == 376.0
    assert ch["release_us"]["max"] == 3036.0 and ch["break_bounce_us"]["max"] == 0.0
    assert ch["stuck"] == 1 and ch["missed"] == 1 and ch["make_bounce_count"]["max"] == 1.0
