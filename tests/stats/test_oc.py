"""`benchlog plan --oc`: the chance that the comparison with the incumbent passes."""

from __future__ import annotations

import numpy as np

from benchlog.stats import UnitModel, operating_characteristic
from benchlog.views.cli import main


def test_at_the_guarded_margin_a_pass_is_as_rare_as_the_confidence_says():
    # By the definition of a one-sided confidence bound (Neyman), a candidate exactly at the margin
    # passes with probability 1 - C. Nearly normal unit medians (tiny within-unit spread): the pivotal
    # bounds are close to exact (Weerahandi 1993); 600 simulated pairs, binomial SD 1.2 points.
    oc = operating_characteristic(
        UnitModel.assumed(0.25, 0.01), units=(16,), ratios=(1.0, 1.2, 1.5), populations=600, seed=4
    )
    at_margin = oc.pass_share[0, 1]
    assert abs(at_margin - 0.10) <= 0.035
    assert oc.pass_share[0, 0] > 0.3 and oc.pass_share[0, 2] < 0.01
    assert np.all(np.diff(oc.pass_share[0]) < 0)  # the worse the candidate, the rarer a pass


def test_plan_prints_the_characteristic_quietly_when_piped(capsys):
    assert main(["plan", "--spec", "VS-505", "--oc", "--populations", "40", "--units", "8"]) == 0
    out, err = capsys.readouterr()
    assert "operating characteristic: P(pass) of 'make bounce p95, candidate / incumbent <= 1.20'" in out
    assert "     4 units" in out and "    16 units" in out  # --units 8: its half and double too
    assert "<- the guarded margin" in out
    assert "simulating" not in err  # the progress line is for a terminal only
    assert main(["plan", "--oc", "--metric", "chatter"]) == 64  # a value --metric cannot take: usage
    assert "not a percentile metric" in capsys.readouterr().err
