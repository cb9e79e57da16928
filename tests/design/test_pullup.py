"""The divider estimate of a pull-up and its uncertainty."""

from __future__ import annotations

import math

import pytest

from benchlog.design import Meter, estimate_pullup
from benchlog.errors import ConfigError

IDEAL = Meter(0.0, 0, 0.001, math.inf)


def test_half_the_open_voltage_means_the_pullup_equals_the_resistor():
    # a pin reading V open and V/2 across R to ground has a pull-up of R (common practice, no source)
    est = estimate_pullup(5.0, 2.5, 33e3, 0.0, IDEAL)
    assert est.ohms == pytest.approx(33e3)
    assert est.low == pytest.approx(33e3) and est.high == pytest.approx(33e3)


def test_meter_loading_is_removed():
    # 5 V through 40 kOhm, read by a 10 MOhm meter: build the two readings from Ohm's law, recover 40 k
    rp, zm, r, vdd = 40e3, 10e6, 33e3, 5.0
    v_open = vdd * zm / (rp + zm)
    rr = r * zm / (r + zm)
    v_load = vdd * rr / (rp + rr)
    est = estimate_pullup(v_open, v_load, r, 0.0, Meter(0.0, 0, 0.001, zm))
    assert est.ohms == pytest.approx(rp, rel=1e-9)
    assert est.supply_v == pytest.approx(vdd, rel=1e-9)


def test_uncertainty_is_first_order_propagation():
    # JCGM 100:2008 (GUM) eq. 10 with rectangular limits a/sqrt(3), for Rp = R (Vo - Vl) / Vl
    m = Meter(0.5, 2, 0.001, math.inf)
    vo, vl, r, tol = 5.0, 2.2, 33e3, 0.01
    est = estimate_pullup(vo, vl, r, tol, m)
    ao, al, ar = vo * 0.005 + 0.002, vl * 0.005 + 0.002, r * tol
    u = math.sqrt((r / vl * ao) ** 2 + (r * vo / vl**2 * al) ** 2 + ((vo - vl) / vl * ar) ** 2) / math.sqrt(3)
    assert est.std_ohms == pytest.approx(u, rel=1e-4)
    assert est.expanded_ohms == pytest.approx(2 * u, rel=1e-4)
    assert est.low < est.ohms < est.high
    assert est.high - est.ohms == pytest.approx(
        r * (1 + tol) * (vo + ao - (vl - al)) / (vl - al) - est.ohms, rel=1e-9
    )


def test_impossible_readings_are_config_errors():
    with pytest.raises(ConfigError):
        estimate_pullup(2.0, 3.0, 1e3)
    with pytest.raises(ConfigError):
        estimate_pullup(5.0, 4.999, 1e3, 0.01, Meter(1.0, 5, 0.01))
