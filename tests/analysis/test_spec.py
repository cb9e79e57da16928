"""Part spec files, verdicts per actuation and per unit."""

from __future__ import annotations

import numpy as np
import pytest

from benchlog.analysis import (
    BREAK,
    FAIL,
    INCOMPLETE,
    MAKE,
    MARGINAL,
    MISSED,
    NO_VERDICT,
    PASS,
    empty_actuations,
    judge,
    load_spec,
    shipped_specs,
    unit_verdict,
)
from benchlog.errors import SpecError
from benchlog.views.cli import main


def test_shipped_demo_specs_carry_the_scenario_limits():
    assert shipped_specs() == ["AG-MS5", "AG-R12", "VS-505"]
    for part in ("AG-MS5", "VS-505"):
        spec = load_spec(part)
        assert spec.limit("make_bounce").max_value == 3000.0  # make bounce <= 3 ms
        assert spec.limit("break_bounce").max_value == 8000.0  # break bounce <= 8 ms
        assert spec.limit("operate_time").max_value == 12000.0  # operate time <= 12 ms
        assert (spec.life.min_cycles, spec.life.confidence) == (100_000, 0.90)
        assert spec.settings().settle_ns == 5_000_000 and spec.settings().chatter_threshold_ns == 10_000
        assert spec.extra["conditions"]["operation"] == "plunger stroke"  # a plunger-operated switch
    assert load_spec("AG-R12").extra["conditions"]["coil_voltage"] == "12 V DC"


GOOD = """
[part]
number = "X-1"
[limits.make_bounce]
max_ms = 3.0
percentile = 95
"""


@pytest.mark.parametrize(
    "text, key",
    [
        ("[part]\nnumber = 5\n", "part.number"),
        ("[limits.make_bounce]\nmax_ms = 3\n", "[part]"),
        (GOOD + "[limits.break_bounce]\nmax_ms = 'eight'\n", "limits.break_bounce.max_ms"),
        (GOOD + "[limits.break_bounce]\nmax_ms = -1\n", "limits.break_bounce.max_ms"),
        (GOOD + "[limits.break_bounce]\nmax_sec = 1\n", "limits.break_bounce.max_sec"),
        (GOOD.replace("percentile = 95", "percentile = 120"), "limits.make_bounce.percentile"),
        (GOOD + "[life]\nmin_cycles = 100000\nconfidence = 90\n", "life.confidence"),
        (GOOD + "[life]\nmin_cycles = 100000\n", "life.confidence"),
        (GOOD + "[limits.chatter]\nmax_events = 1\n", "limits.chatter.per_cycles"),
        (GOOD + "[limits.weld_time]\nmax_ms = 1\n", "limits.weld_time"),
        (GOOD + "[lmits]\n", "[lmits]"),
        (GOOD + "[conditions]\nambient = 23\n", "conditions.ambient"),
        (GOOD + "[conditions]\nhumidity = '40 %'\n", "conditions.humidity"),
        ("[part\nnumber = 1", "not valid TOML"),
    ],
)
def test_malformed_spec_is_one_line_naming_file_and_key(tmp_path, text, key):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(SpecError) as err:
        load_spec(path)
    msg = str(err.value)
    assert "\n" not in msg and str(path) in msg and key in msg


def test_missing_spec_file_is_a_spec_error(tmp_path):
    with pytest.raises(SpecError, match="cannot read"):
        load_spec(tmp_path / "nope.toml")


def rows_with(make_bounce_us, kind=MAKE):
    r = empty_actuations(len(make_bounce_us))
    r["kind"] = kind
    r["bounce_us"] = make_bounce_us
    r["transit_us"] = 5000.0
    r["drive_level"] = 1 if kind == MAKE else 0
    r["cycle"] = np.arange(len(r))
    r["transfer_us"] = np.nan
    return r


def test_per_actuation_verdicts_with_marginal_band():
    spec = load_spec("AG-MS5")  # make bounce 3 ms, 10 % band: marginal above 2.7 ms
    r = rows_with([1000.0, 2800.0, 3100.0, np.nan])
    r["flags"][3] = MISSED
    judge(r, spec)
    assert r["verdict"].tolist() == [PASS, MARGINAL, FAIL, FAIL]
    r["flags"][1] = INCOMPLETE
    judge(r, spec)
    assert r["verdict"][1] == NO_VERDICT


def test_unit_verdict_uses_the_limit_percentile():
    spec = load_spec("AG-MS5")
    # 100 makes, 4 of them over the limit: the p95 stays under 3 ms -> pass (not marginal: p95 is 1 ms)
    values = np.full(100, 1000.0)
    values[:4] = 5000.0
    verdict, reason = unit_verdict(rows_with(values), spec)
    assert verdict == PASS, reason
    values[:10] = 5000.0  # now more than 5 %: p95 is 5 ms
    verdict, reason = unit_verdict(rows_with(values), spec)
    assert verdict == FAIL and "make bounce p95 5 ms > 3 ms" in reason
    verdict, reason = unit_verdict(rows_with(np.full(50, 2900.0)), spec)
    assert verdict == MARGINAL and "within 10%" in reason


def test_unit_verdict_fails_a_missed_make_before_the_required_life():
    spec = load_spec("AG-MS5")
    r = rows_with(np.full(10, 500.0))
    r["flags"][7] = MISSED
    verdict, reason = unit_verdict(r, spec)
    assert verdict == FAIL and "cycle 7" in reason and "100000" in reason


def test_unit_verdict_chatter_per_cycles():
    spec = load_spec("AG-MS5")  # at most 1 chatter event per 1000 cycles
    r = rows_with(np.full(2000, 500.0))
    r["chatter"][:2] = 1
    assert unit_verdict(r, spec)[0] == PASS
    r["chatter"][:3] = 1
    verdict, reason = unit_verdict(r, spec)
    assert verdict == FAIL and "chatter" in reason
    b = rows_with(np.full(3, 500.0), kind=BREAK)
    assert unit_verdict(b, spec)[0] == PASS


def test_cli_turns_a_bad_spec_into_one_line(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text("[part]\nnumber = 5\n")
    rec = tmp_path / "rec.txt"
    rec.write_text("")
    assert main(["analyze", str(rec), "--spec", str(bad)]) == SpecError.exit_code
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "part.number" in err
