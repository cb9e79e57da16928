"""Preferred values against IEC 60063."""

from __future__ import annotations

import pytest

from benchlog.design import E12, E24, format_si, preferred_values
from benchlog.errors import ConfigError

# IEC 60063:2015, tables of the E12 and E24 series (the published two-digit values)
IEC_E12 = "10 12 15 18 22 27 33 39 47 56 68 82"
IEC_E24 = "10 11 12 13 15 16 18 20 22 24 27 30 33 36 39 43 47 51 56 62 68 75 82 91"


def test_decades_are_the_published_series():
    assert [round(x * 10) for x in E12] == [int(v) for v in IEC_E12.split()]
    assert [round(x * 10) for x in E24] == [int(v) for v in IEC_E24.split()]


def test_e12_is_every_second_e24_value():
    # IEC 60063: each series is made of every second value of the next finer one
    assert E24[::2] == E12


def test_values_over_several_decades():
    vals = preferred_values("E12", 1e-9, 1e-7)
    assert len(vals) == 25
    assert vals[0] == pytest.approx(1e-9) and vals[-1] == pytest.approx(1e-7)
    assert preferred_values("e24", 100, 1000).tolist()[:4] == [100, 110, 120, 130]


def test_bad_series_is_a_config_error():
    with pytest.raises(ConfigError):
        preferred_values("E7", 1, 10)
    with pytest.raises(ConfigError):
        preferred_values("E12", 10, 1)


def test_format_si():
    assert format_si(4700, "ohm") == "4.7 kohm"
    assert format_si(1e-7, "F") == "100 nF"
    assert format_si(0, "ohm") == "0 ohm"
