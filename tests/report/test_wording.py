"""Words of the report's statistics table that must follow the numbers they stand beside."""

from dataclasses import asdict

import numpy as np
from scipy import stats

from benchlog.stats import unit_tests
from benchlog.views.report._html import _metric_table


def test_a_better_candidate_is_not_called_worse():
    # scipy.stats.mannwhitneyu documentation example, the lower group as the candidate: exact one-sided
    # p that the candidate's units sit lower = 0.0556; the old table printed "candidate worse, p = 1.000"
    cand, inc = np.array([20, 11, 17, 12.0]), np.array([19, 22, 16, 29, 24.0])
    entry = {"units": {"VS": 4, "AG": 5}, "values": {"VS": 4, "AG": 5}, "VS": {}, "AG": {}}
    entry["tests"] = asdict(unit_tests([cand, inc], "per-unit p95"))
    html = _metric_table(entry, ["VS", "AG"], "release_time")
    p = stats.mannwhitneyu(cand, inc, alternative="less", method="exact").pvalue
    assert f"candidate better, one-sided: p = {p:.3f}" in html
    assert "candidate worse" not in html
