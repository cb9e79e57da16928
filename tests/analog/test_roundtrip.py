"""Round trip against the simulator's ground truth: its contact physics rendered to an analog trace
(noise, finite edge rate, contact resistance, a 10-bit ADC) and read back by the voltage definitions."""

from __future__ import annotations

import numpy as np
import pytest

from benchlog.analog import (
    Capture,
    fraction_levels,
    measure_capture,
    open_circuit_level,
    read_capture,
    render_contact,
)
from benchlog.analysis import BREAK, INCOMPLETE, MAKE, AnalysisSettings
from benchlog.sim import load_preset
from benchlog.sim._physics import DRIVE, EDGE, cycles, draw_unit


def simulated(part: str, seed: int, count: int = 4):
    pop = load_preset("demo").populations[part]
    rng = np.random.default_rng(seed)
    unit = draw_unit(rng, 0, "u", pop)
    unit.life = 1e12  # no failure within the capture
    (t, kind, level), truth = cycles(rng, unit, 5_000_000, 50_000_000, 50_000_000, count, 24, 2.0)
    return t, kind, level, truth, rng


@pytest.mark.parametrize(("part", "seed"), [("AG-MS5", 1), ("VS-505", 2), ("VS-505", 3)])
def test_true_bounce_within_the_sample_interval(part, seed):
    t, kind, level, truth, rng = simulated(part, seed)
    e = kind == EDGE
    dt = 100.0
    n = int((t.max() + 30_000_000) / dt)
    v = render_contact(
        t[e], level[e], 0, start_ns=0.0, dt_ns=dt, n=n, ramp_ns=300.0, noise_v=0.05, bits=10, rng=rng
    )
    cap = Capture("sim", ("contact",), (v,), 0.0, dt * 1e-9)
    v_open = open_circuit_level(v)
    assert v_open == pytest.approx(12.0, abs=0.05)
    # the simulator's shortest pulse is 2 us, so the minimum duration here is 1 us (not the 10 us rule)
    m = measure_capture(cap, 0, fraction_levels(v_open, min_ns=1_000), AnalysisSettings(settle_ns=5_000_000))
    rows = m.actuations[(m.actuations["flags"] & INCOMPLETE) == 0]
    assert len(rows) == len(truth)
    assert rows["kind"].tolist() == [MAKE if k == 0 else BREAK for k in truth["kind"]]
    assert np.abs(rows["bounce_us"] - truth["bounce_us"]).max() * 1e3 <= dt
    assert rows["bounce_count"].tolist() == truth["bounce_count"].tolist()
    # first transitions: the ramp is centred on the true edge; a fall through 10 % and a rise through
    # 90 % both come 0.4 ramp after its middle
    assert np.abs(rows["t_first_ns"] - (truth["t_first_ns"] + 0.4 * 300.0)).max() <= dt


def test_drive_channel_gives_operate_and_release_times(tmp_path):
    t, kind, level, truth, rng = simulated("AG-MS5", 5, count=2)
    dt = 200.0
    n = int((t.max() + 20_000_000) / dt)
    e, d = kind == EDGE, kind == DRIVE
    contact = render_contact(t[e], level[e], 0, start_ns=0.0, dt_ns=dt, n=n, noise_v=0.02, rng=rng)
    # the coil drive as a clean 24 V signal (closed = energised, rendered with the same ramp model)
    coil = 24.0 - render_contact(
        t[d], level[d], 0, start_ns=0.0, dt_ns=dt, n=n, v_open=24.0, r_contact=0.0, noise_v=0.0
    )
    np.savez(tmp_path / "cap.npz", dt=np.float64(dt * 1e-9), contact=contact, coil=coil)
    cap = read_capture(str(tmp_path / "cap.npz"))
    m = measure_capture(
        cap,
        "contact",
        fraction_levels(12.0, min_ns=2_000),
        AnalysisSettings(settle_ns=5_000_000),
        drive_channel="coil",
    )
    rows = m.actuations
    assert len(rows) == len(truth)
    # operate / release time: drive to the first transition (the rendered ramp moves it by 0.4 x 200 ns)
    assert np.abs(rows["transit_us"] - truth["transit_us"]).max() <= 0.2 + 2 * dt / 1e3
