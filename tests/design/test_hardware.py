"""RC + Schmitt candidates replayed on recorded contacts: a single hand-drawn bounce against the closed
form, the tolerance corners, and the preferred-value search on simulated bouncing contacts."""

from __future__ import annotations

import math

import numpy as np
import pytest

from benchlog.design import (
    Circuit,
    InputThresholds,
    channel_record,
    check_rc,
    design_rc,
    find_input,
    load_thresholds,
    preferred_values,
)

from ._bouncing import bouncing

MS = 1_000_000
FLAT = InputThresholds("test input", 5.0, (3.0, 3.0), (1.5, 1.5), 0.0, False, "test values")


def _one_bounce():
    # make at 10 ms with one reopening 10.2-10.7 ms (0.5 ms), break at 30 ms, make at 50 ms, break 70 ms
    t = np.array([10.0, 10.2, 10.7, 30.0, 50.0, 70.0]) * MS
    lv = np.array([1, 0, 1, 0, 1, 0])
    return channel_record(t.astype(np.int64), lv, None, 0, 5 * MS, 90 * MS)


def test_single_reopening_against_the_closed_form():
    rec = _one_bounce()
    circ = Circuit(5.0, 0.0, (10e3, 10e3), 0.0, 0.0, FLAT)
    # no series R: closing empties C at once; the 0.5 ms reopening charges it through 10 kOhm:
    # peak = 5 (1 - exp(-0.5 ms / tau)) (RC charging, closed form)
    ok = check_rc([rec], circ, 0.0, 100e-9, 0.2)  # tau = 1 ms: peak 1.967 V, margin 3 - 1.967
    assert ok.corners == 1
    assert ok.false_nominal == 0 and ok.passes
    assert ok.margin_nominal_v == pytest.approx(3.0 - 5.0 * (1 - math.exp(-0.5)), abs=1e-9)
    assert ok.press_ms[2] == pytest.approx(0.0)
    # release: charge from 0 V to VT+ = 3 V takes tau ln(5 / (5 - 3)) = 0.916 ms
    assert ok.release_ms[2] == pytest.approx(math.log(2.5), rel=1e-6)
    bad = check_rc([rec], circ, 0.0, 10e-9, 0.2)  # tau = 0.1 ms: peak 4.97 V > VT+: passes through
    assert bad.false_nominal == 2 and not bad.passes
    assert bad.margin_nominal_v == pytest.approx(3.0 - 5.0 * (1 - math.exp(-5.0)), abs=1e-9)


def test_corners_span_every_tolerance():
    th = find_input(load_thresholds(), "CMOS Schmitt inverter, 5 V")
    circ = Circuit(5.0, 0.05, (9.9e3, 10.1e3), 0.05, 0.10, th)
    net = circ.corners(1e3, 100e-9)
    assert len(net) == 65  # nominal + 2**6 corners
    assert net.c.min() == pytest.approx(90e-9) and net.c.max() == pytest.approx(110e-9)
    assert net.rp.min() == 9.9e3 and net.vdd.max() == pytest.approx(5.25)
    assert (net.vt_plus - net.vt_minus >= th.hysteresis_min - 1e-12).all()


@pytest.fixture(scope="module")
def simulated():
    e = bouncing(600, 40 * MS, np.log(0.5e6), 0.4, np.log(1e6), 0.3, seed=9)
    return channel_record(e.t_ns, e.level, None, 0, 5 * MS, int(e.t_ns[-1]) + 20 * MS)


def test_recommended_values_reject_every_bounce_and_are_the_smallest(simulated):
    th = find_input(load_thresholds(), "CMOS Schmitt inverter, 5 V")
    circ = Circuit(5.0, 0.05, (9.9e3, 10.1e3), 0.05, 0.10, th)
    d = design_rc([simulated], circ, series=0.0, min_margin_v=0.2)
    best = d.chosen
    assert best is not None and best.passes and best.actuations == 1200
    assert best.false_worst == 0 and best.missed_worst == 0 and best.margin_worst_v >= 0.2
    assert best.cap in preferred_values("E12", 1e-10, 1e-4)
    smaller = preferred_values("E12", 1e-10, best.cap)[-2]
    assert not check_rc([simulated], circ, 0.0, float(smaller), 0.2).passes
