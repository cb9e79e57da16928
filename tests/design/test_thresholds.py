"""The shipped threshold table and the errors a malformed one gives."""

from __future__ import annotations

import pytest

from benchlog.design import find_input, load_thresholds, parse_thresholds
from benchlog.errors import ConfigError


def test_shipped_table_rows_are_sane_and_sourced():
    table = load_thresholds()
    assert len(table) >= 6
    for row in table.values():
        assert row.source.strip()
        assert 0 < row.vt_minus[0] <= row.vt_plus[1] <= row.supply
        assert row.hysteresis_min <= row.vt_plus[1] - row.vt_minus[0]
    avr = find_input(table, "8-bit AVR input, 5 V")
    # ATmega328P class: VIL max 0.3 VCC, VIH min 0.6 VCC (from memory)
    assert avr.vt_plus == (1.5, 3.0) and avr.pullup_ohms == (20000.0, 50000.0)
    vtp, vtm = avr.at_supply(4.5)
    assert vtp == pytest.approx((1.35, 2.7))


def test_fragment_lookup():
    table = load_thresholds()
    assert find_input(table, "hc-family schmitt, 4.5").name == "HC-family Schmitt, 4.5 V"
    with pytest.raises(ConfigError, match="several"):
        find_input(table, "AVR")
    with pytest.raises(ConfigError, match="not in the table"):
        find_input(table, "no such input")


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("[[input", "not valid TOML"),
        ("x = 1", r"\[\[input\]\]"),
        ('[[input]]\nname = "a"\nsupply = 5\nvt_plus = [3, 2]\nvt_minus = [1, 2]\nsource = "s"', "vt_plus"),
        ('[[input]]\nname = "a"\nsupply = 5\nvt_plus = [2, 3]\nvt_minus = [1, 2]', "source"),
        (
            '[[input]]\nname = "a"\nsupply = 5\nvt_plus = [2, 9]\nvt_minus = [1, 2]\nsource = "s"',
            "above the supply",
        ),
    ],
)
def test_malformed_tables(text, match, tmp_path):
    with pytest.raises(ConfigError, match=match) as err:
        parse_thresholds(text, "t.toml")
    assert "\n" not in str(err.value)
    p = tmp_path / "t.toml"
    p.write_text(text)
    with pytest.raises(ConfigError):
        load_thresholds(p)


def test_missing_file():
    with pytest.raises(ConfigError, match="cannot read"):
        load_thresholds("/nonexistent/thresholds.toml")


def test_hc_family_schmitt_hysteresis_at_4_5_v():
    # HC-family (high-speed CMOS, JEDEC JESD7) Schmitt-trigger inverter datasheets, several makers:
    # at VCC = 4.5 V the guaranteed hysteresis VT+ - VT- is 0.4 V minimum (from memory)
    row = find_input(load_thresholds(), "HC-family Schmitt, 4.5 V")
    assert row.supply == 4.5 and row.hysteresis_min == 0.4
