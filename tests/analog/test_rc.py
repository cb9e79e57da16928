"""The RC node replayed on sampled waveforms, against the analytic first-order solution and scipy.signal;
and R and C chosen from a rendered trace of the simulator's contact physics."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from benchlog.analog import Capture, fraction_levels, measure_capture, render_contact
from benchlog.analog._rc import corners, design_from_waveform, rc_node, score, windows
from benchlog.analysis import AnalysisSettings
from benchlog.design import find_input, load_thresholds
from benchlog.sim import load_preset
from benchlog.sim._physics import EDGE, cycles, draw_unit


def test_step_response_matches_the_analytic_solution():
    # first-order low-pass step response v(t) = 1 - exp(-t / tau) (any circuits textbook, e.g. Horowitz
    # and Hill, The Art of Electronics, RC circuits); an input step that is exactly linear between samples
    # 9 and 10 is a ramp of one sample interval, whose exact response is known in closed form too
    dt, tau = 1e-6, 47e-6
    u = np.zeros(500)
    u[10:] = 1.0
    v = rc_node(u, dt, np.array([tau]))[0]
    t = np.arange(500) * dt
    t0, t1 = 9 * dt, 10 * dt
    ramp = lambda x: np.where(x > 0, x - tau * (1 - np.exp(-x / tau)), 0.0)  # noqa: E731
    exact = (ramp(t - t0) - ramp(t - t1)) / dt  # response to a unit ramp from t0 to t1 (superposition)
    assert np.abs(v - exact).max() < 1e-12
    # far from the step it is the textbook step response delayed by half a sample
    far = t > 30 * dt
    assert np.abs(v[far] - (1 - np.exp(-(t[far] - 9.5 * dt) / tau))).max() < 2e-4


@pytest.mark.parametrize("tau", [3e-6, 1e-4, 2e-3])
def test_square_wave_matches_scipy_lsim(tau):
    # reference: scipy.signal.lsim of the transfer function 1 / (tau s + 1), which interpolates the input
    # linearly between samples (its default) and discretises with the matrix exponential
    dt = 2e-6
    t = np.arange(4000) * dt
    u = 5.0 * (np.sin(2 * np.pi * t / 1.3e-3) > 0)
    v = rc_node(u, dt, np.array([tau]))[0]
    _, ref, _ = signal.lsim(signal.lti([1.0], [tau, 1.0]), u, t, X0=[u[0] * tau])
    assert np.abs(v - ref).max() < 1e-9


def test_exact_discretisation_matches_scipy_lfilter_and_the_uneven_path():
    # reference: the exact first-order-hold discretisation written out as an IIR filter for
    # scipy.signal.lfilter; the uneven-sample path (a prefix scan of affine maps) must agree with it
    rng = np.random.default_rng(4)
    dt, tau = 1e-6, 2e-5
    u = np.cumsum(rng.normal(0, 0.1, 3000))
    a = np.exp(-dt / tau)
    q = 1 - tau * (1 - a) / dt
    ref = np.concatenate(
        ([u[0]], signal.lfilter([q, 1 - a - q], [1.0, -a], u[1:], zi=[a * u[0] + (1 - a - q) * u[0]])[0])
    )
    fast = rc_node(u, dt, np.array([tau]))[0]
    uneven = rc_node(u, np.full(len(u) - 1, dt), np.array([tau]))[0]
    assert np.abs(fast - ref).max() < 1e-10 and np.abs(uneven - ref).max() < 1e-10


def test_windows_restart_settled():
    u = np.concatenate((np.zeros(50), np.ones(50), np.ones(50) * 3))
    v = rc_node(u, 1e-6, np.array([1e-5, 1e-4]), reset=np.array([100]))
    assert v[0, 100] == 3.0 and v[1, 100] == 3.0 and v[0, 99] < 1.0


def rendered(part: str, seed: int):
    pop = load_preset("demo").populations[part]
    rng = np.random.default_rng(seed)
    unit = draw_unit(rng, 0, "u", pop)
    unit.life = 1e12
    (t, kind, level), truth = cycles(rng, unit, 2_000_000, 30_000_000, 30_000_000, 2, 24, 2.0)
    e = kind == EDGE
    dt = 500.0
    n = int((t.max() + 25_000_000) / dt)
    v = render_contact(t[e], level[e], 0, start_ns=0.0, dt_ns=dt, n=n, noise_v=0.03, rng=rng)
    cap = Capture("sim", ("contact",), (v,), 0.0, dt * 1e-9)
    m = measure_capture(cap, 0, fraction_levels(12.0, min_ns=5_000), AnalysisSettings(settle_ns=5_000_000))
    return cap, v, m, truth


def test_chosen_capacitor_rejects_every_bounce_and_the_next_smaller_does_not():
    cap, v, m, _ = rendered("VS-505", 7)
    row = find_input(load_thresholds(), "CMOS Schmitt inverter, 5 V")
    d = design_from_waveform(cap, v, m, 12.0, row, 5.0, r_series=10_000.0)
    assert d.chosen is not None and d.chosen.passes
    assert d.chosen.false_transitions == 0 and d.chosen.missed == 0
    smaller = [s for s in d.table if s.c < d.chosen.c]
    assert smaller and not smaller[-1].passes
    # the same candidate, scored directly at its corners, gives the same verdict
    win = windows(cap, v, m, 12.0, max_after_ns=20_000_000)
    again = score(win, 10_000.0, d.chosen.c, corners(10_000.0, d.chosen.c, 0.05, 0.10, row, 5.0, 0.05), 0.2)
    assert again.passes
    # a tenth of the chosen C lets bounce through at some corner
    tiny = score(
        win, 10_000.0, d.chosen.c / 10, corners(10_000.0, d.chosen.c / 10, 0.05, 0.1, row, 5.0, 0.05), 0.2
    )
    assert tiny.false_transitions > 0
