"""`benchlog scope` end to end on the demo captures, checked against the simulator's own truth file."""

from __future__ import annotations

import json

import numpy as np
import pytest

from benchlog.views.cli import main


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    folder = tmp_path_factory.mktemp("scope-demo")
    assert main(["scope", "--make-demo", str(folder)]) == 0
    return folder


def run_json(capsys, *argv) -> dict:
    capsys.readouterr()
    assert main(["scope", *argv, "--json"]) == 0
    return json.loads(capsys.readouterr().out)


@pytest.mark.parametrize(
    ("name", "extra"),
    [
        ("AG-MS5_make.csv", []),
        ("VS-505_make.csv", []),
        ("VS-505_break.csv", []),
        ("AG-MS5_cycles.npz", ["--drive-channel", "coil"]),
        ("AG-R12_relay.wav", ["--full-scale", "16"]),
    ],
)
def test_demo_captures_match_the_simulators_truth(demo, capsys, name, extra):
    truth = json.loads((demo / "truth.json").read_text())[name]
    doc = run_json(capsys, str(demo / name), *extra)["captures"][0]
    rows = [r for r in doc["actuations"] if "incomplete" not in r["flags"]]
    assert [r["kind"] for r in rows] == [t["kind"] for t in truth]
    dt_us = doc["sample_interval_s"] * 1e6
    for r, t in zip(rows, truth, strict=True):
        # the rendered edge ramp shifts first and last transition alike, so bounce time survives within
        # a sample interval or two; bounces shorter than the 10 us rule are not counted (the simulator's
        # shortest is 2 us), so the count may only be lower
        if r["bounce_count"] == t["bounce_count"]:
            assert abs(r["bounce_us"] - t["bounce_us"]) <= 2 * dt_us + 0.05
        else:
            assert r["bounce_count"] < t["bounce_count"]
    if "--drive-channel" in extra:
        assert all(r["transit_us"] is not None for r in rows)


def test_text_output_compare_design_plot_and_png(demo, capsys, tmp_path):
    png = tmp_path / "chart.png"
    argv = ["scope", str(demo / "VS-505_make.csv"), "--compare", "--design", "--input", "CMOS Schmitt"]
    argv += ["--sample-us", "20", "--plot", "-o", str(png)]
    assert main(argv) == 0
    out = capsys.readouterr().out
    assert "sampler view" in out and "recommended C =" in out and "contact V" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_json_has_sampler_and_rc(demo, capsys):
    doc = run_json(
        capsys, str(demo / "VS-505_break.csv"), "--compare", "--design", "--input", "HC-family Schmitt, 4.5"
    )["captures"][0]
    assert doc["sampler"]["summary"]["matched"] == 1
    chosen = doc["rc"]["chosen"]
    assert chosen["passes"] and chosen["false_transitions"] == 0
    smaller = [s for s in doc["rc"]["table"] if s["cap_farads"] < chosen["cap_farads"]]
    assert smaller and not smaller[-1]["passes"]


@pytest.mark.parametrize(
    "argv",
    [
        ["scope"],
        ["scope", "x.csv", "--design"],
        ["scope", "x.csv", "--levels", "1:3"],
        ["scope", "x.csv", "--open-pct", "150"],
    ],
)
def test_usage_errors_exit_64_with_one_line(capsys, argv):
    # the command line's convention (docs/commands.md): a usage error exits 64 with one line, whether
    # argparse finds it (a bad value) or the command does (options that need another)
    with pytest.raises(SystemExit) as exc:
        code = main(argv)
        raise SystemExit(code)
    assert exc.value.code == 64
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("benchlog: error: ")


def test_bad_captures_give_one_line_and_exit_10(tmp_path, capsys):
    (tmp_path / "words.csv").write_text("no numbers here\nat all\n")
    slow = tmp_path / "slow.npz"
    t = np.arange(20_000)
    np.savez(slow, dt=np.float64(5e-6), contact=np.where((t > 5000) & (t < 12000), 0.0, 12.0))
    flat = tmp_path / "flat.npz"
    np.savez(flat, dt=np.float64(1e-7), contact=np.random.default_rng(0).uniform(0, 5, 20_000))
    for path, words in (
        (tmp_path / "words.csv", "no lines of numbers"),
        (slow, "too slow for the 10 us minimum duration"),
        (flat, "no clear open-circuit level"),
        (tmp_path / "missing.csv", "no such file"),
    ):
        capsys.readouterr()
        assert main(["scope", str(path)]) == 10
        err = capsys.readouterr().err
        assert words in err and len(err.strip().splitlines()) == 1


def test_a_trace_high_when_closed_reads_the_same(demo, capsys, tmp_path):
    # the same capture measured across the load instead of across the contact: 12 V minus the contact
    with np.load(demo / "AG-MS5_cycles.npz") as cap:
        np.savez(tmp_path / "load.npz", dt=cap["dt"], load=12.0 - cap["contact"].astype(np.float64))
    across = run_json(capsys, str(demo / "AG-MS5_cycles.npz"), "--channel", "contact")["captures"][0]
    load = run_json(capsys, str(tmp_path / "load.npz"), "--closed-high", "--open-v", "12")["captures"][0]
    assert [r["bounce_count"] for r in load["actuations"]] == [
        r["bounce_count"] for r in across["actuations"]
    ]
    assert np.allclose(
        [r["bounce_us"] or 0 for r in load["actuations"]],
        [r["bounce_us"] or 0 for r in across["actuations"]],
        atol=2,
    )
