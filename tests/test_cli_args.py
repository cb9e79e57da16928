import argparse

import pytest

from benchlog.views.cli._args import fraction, non_negative, number_within, positive


@pytest.mark.parametrize(
    "parse, good, bad",
    [
        (positive, ["1e-9", "3"], ["0", "-1", "nan", "inf", "x"]),
        (non_negative, ["0", "2.5"], ["-0.1", "nan"]),
        (fraction, ["0.5", "0.999"], ["0", "1", "1.5"]),
        (number_within(0, 1, low_inclusive=True), ["0", "0.25"], ["1", "-1e-12"]),
    ],
)
def test_bounds(parse, good, bad):
    for text in good:
        assert parse(text) == float(text)
    for text in bad:
        with pytest.raises(argparse.ArgumentTypeError):
            parse(text)
