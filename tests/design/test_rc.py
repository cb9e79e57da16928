"""The exact RC node simulation and the Schmitt input against closed-form results."""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchlog.design import Networks, affine_scan, node_at_edges, node_curve, schmitt

MS = 1_000_000


def test_time_constant_10k_100n_is_1ms_and_63_percent():
    # tau = R C = 10 kOhm * 100 nF = 1 ms; after one tau an RC charge reaches 1 - 1/e = 63.2 % of the
    # step (the textbook RC charging curve V = V0 (1 - exp(-t/RC)), e.g. Horowitz and Hill, The Art of
    # Electronics, ch. 1, RC circuits; chapter from memory)
    net = Networks.of(5.0, 10e3, 0.0, 100e-9, 5.0 * (1 - math.exp(-1)), 1.0)
    # closed (node at 0 V, no series R), opens at t = 0
    ch = schmitt(net, np.array([-5 * MS, 0]), np.array([1, 0]), 0)
    rise = ch.t_ns[ch.new == 0]
    assert abs(rise[0] - 1.0 * MS) < 1.0  # ns
    v = node_curve(net, 0, np.array([-5 * MS, 0]), np.array([1, 0]), 0, np.array([1.0 * MS]))
    assert abs(v[0] / 5.0 - 0.632) < 5e-4


def test_settling_within_one_percent_takes_4_6_tau():
    # within 1 % after ln(100) = 4.605 tau (common practice, no source; ln(100) from the formula)
    net = Networks.of(3.3, 10e3, 0.0, 100e-9, 3.3 * 0.99, 0.5)
    ch = schmitt(net, np.array([-5 * MS, 0]), np.array([1, 0]), 0)
    assert abs(ch.t_ns[-1] - math.log(100) * MS) < 1.0
    assert abs(math.log(100) - 4.605) < 1e-3


def test_fall_time_to_a_threshold_is_tau_ln_v0_over_vth():
    # discharge from V0 toward 0: V = V0 exp(-t/tau), so t = tau ln(V0 / Vth) (closed form)
    # contact to ground through a series 1 kOhm with the pull-up 1 GOhm (negligible): tau = 1k * 1u = 1 ms
    vdd, vth = 5.0, 1.25
    net = Networks.of(vdd, 1e9, 1e3, 1e-6, 4.0, vth)
    ch = schmitt(net, np.array([0]), np.array([1]), 0)
    tau = (1e9 * 1e3 / (1e9 + 1e3)) * 1e-6 * 1e9
    vinf = vdd * 1e3 / (1e9 + 1e3)
    assert abs(ch.t_ns[0] - tau * math.log((vdd - vinf) / (vth - vinf))) < 1.0
    assert abs(ch.t_ns[0] - MS * math.log(4.0)) < 5.0  # tau ln(5 / 1.25) = 1.386 ms


def test_ten_to_ninety_percent_rise_is_2_2_tau():
    # 10 %-90 % rise time of a first-order RC = tau ln 9 = 2.197 tau (common practice, no source)
    net = Networks.of(1.0, 10e3, 0.0, 100e-9, 0.9, 0.1)
    t = node_curve(net, 0, np.array([-5 * MS, 0]), np.array([1, 0]), 0, np.linspace(0, 5 * MS, 50001))
    t10 = np.argmax(t >= 0.1) * 100
    t90 = np.argmax(t >= 0.9) * 100
    assert abs((t90 - t10) / MS - math.log(9)) < 2e-3


def test_closed_level_is_the_divider():
    # closed contact through Rs: the node settles at Vdd Rs / (Rp + Rs) (Ohm's law divider)
    net = Networks.of(5.0, 47e3, 4.7e3, 1e-9, 3.0, 1.0)
    v = node_at_edges(net, np.array([0, 50 * MS]), np.array([1, 0]), 0)
    assert abs(v[0, 1] - 5.0 * 4.7e3 / 51.7e3) < 1e-9


@pytest.mark.parametrize("n", [1, 257, 1000, 4099])  # one-level and blocked scans
def test_affine_scan_matches_a_loop(n):
    rng = np.random.default_rng(2)
    a, b = rng.uniform(0, 1, (2, n)), rng.uniform(-1, 1, (2, n))
    big_a, big_b = affine_scan(a, b)
    for row in range(2):
        v, seq = 0.7, []
        for k in range(n):
            v = a[row, k] * v + b[row, k]
            seq.append(v)
        assert np.allclose(big_a[row] * 0.7 + big_b[row], seq, atol=1e-12, rtol=0)


def test_piecewise_voltage_matches_step_by_step_formula():
    rng = np.random.default_rng(4)
    t = np.cumsum(rng.integers(10_000, 400_000, 60))
    lv = (np.arange(60) % 2 == 0).astype(np.int8)
    net = Networks.of(5.0, 10e3, 2.2e3, 47e-9, 3.0, 1.5)
    v = node_at_edges(net, t, lv, 0)[0]
    vv = 5.0
    for k in range(1, 60):
        closed = lv[k - 1] == 1
        vinf = 5.0 * 2.2e3 / 12.2e3 if closed else 5.0
        tau = (10e3 * 2.2e3 / 12.2e3 if closed else 10e3) * 47e-9 * 1e9
        vv = vinf + (vv - vinf) * math.exp(-(t[k] - t[k - 1]) / tau)
        assert abs(v[k] - vv) < 1e-9


def test_schmitt_hysteresis_ignores_a_short_reopening():
    # closed through no series R: a 0.2 ms reopening lifts the node to 5 (1 - exp(-0.2)) = 0.906 V with
    # tau = 1 ms: below VT+ = 3 V, no change; a 2 ms one reaches 4.32 V: the input goes high again
    net = Networks.of(5.0, 10e3, 0.0, 100e-9, 3.0, 1.5)
    short = schmitt(net, np.array([0, 10 * MS, 10 * MS + 200_000]), np.array([1, 0, 1]), 0)
    assert short.new.tolist() == [1]
    long = schmitt(net, np.array([0, 10 * MS, 12 * MS]), np.array([1, 0, 1]), 0)
    assert long.new.tolist() == [1, 0, 1]
    assert abs(long.t_ns[1] - (10 * MS + MS * math.log(5 / 2))) < 1.0
