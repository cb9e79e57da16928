"""Every spec and analysis setting has a physically sensible range, stated in the error."""

from __future__ import annotations

import pytest

from benchlog.analysis import load_spec
from benchlog.analysis._settings import load_settings
from benchlog.errors import ConfigError, SpecError

HEAD = '[part]\nnumber = "AG-R12"\n'


@pytest.mark.parametrize(
    "body, key, shown_range",
    [
        ("[measure]\nglitch_floor_us = 1e300\n", "measure.glitch_floor_us", "<= 1000"),
        ("[measure]\nglitch_floor_ms = 5\n", "measure.glitch_floor_ms", "<= 1.0"),
        ("[measure]\nsettle_ms = 1e9\n", "measure.settle_ms", "<= 1000"),
        ("[measure]\nchatter_threshold_us = 1e7\n", "measure.chatter_threshold_us", "<= 100000"),
        ("[limits.make_bounce]\nmax_ms = 1e12\n", "limits.make_bounce.max_ms", "<= 10000"),
        ("[limits.make_bounce]\nmax_ms = 0\n", "limits.make_bounce.max_ms", "> 0"),
        ("[limits.make_bounce_count]\nmax = 10000000\n", "limits.make_bounce_count.max", "to 100,000"),
        (
            "[limits.chatter]\nmax_events = 1\nper_cycles = 10000000000000\n",
            "limits.chatter.per_cycles",
            "to 1,000",
        ),
        ("[life]\nmin_cycles = 10000000000000\nconfidence = 0.9\n", "life.min_cycles", "to 1,000"),
        ("[verdict]\nmax_missed = -1\n", "verdict.max_missed", "from 0"),
    ],
)
def test_an_out_of_range_spec_setting_names_its_range(tmp_path, body, key, shown_range):
    path = tmp_path / "spec.toml"
    path.write_text(HEAD + body)
    with pytest.raises(SpecError) as err:
        load_spec(path)
    text = str(err.value)
    assert key in text and shown_range in text and "\n" not in text


def test_the_largest_sensible_values_are_accepted(tmp_path):
    path = tmp_path / "spec.toml"
    path.write_text(
        HEAD
        + "[measure]\nglitch_floor_us = 1000\nsettle_ms = 1000\nchatter_threshold_ms = 100\n"
        + "[limits.make_bounce]\nmax_ms = 10000\n[life]\nmin_cycles = 1000000000000\nconfidence = 0.9\n"
    )
    spec = load_spec(path)
    assert spec.glitch_floor_ns == 1_000_000 and spec.settle_ns == 1_000_000_000


@pytest.mark.parametrize(
    "key, value", [("glitch_floor_us", "1e300"), ("settle_ms", "5000"), ("lateness_ms", "1e9")]
)
def test_an_out_of_range_analysis_setting_names_its_range(tmp_path, key, value):
    path = tmp_path / "settings.toml"
    path.write_text(f"{key} = {value}\n")
    with pytest.raises(ConfigError, match=rf"{key}: expected a number from 0 to \d"):
        load_settings(str(path))
