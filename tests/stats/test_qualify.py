"""End to end on the simulator's demo populations (benchlog.sim's unit model and its preset's true
parameters; invented numbers): the verdict follows the truth when enough units run, and stays
"not yet decidable" when too few do."""

import json
import math

import numpy as np
import pytest
from scipy import stats
from simpop import demo_population, draw

from benchlog.analysis import load_spec
from benchlog.stats import (
    FAIL,
    PASS,
    UNDECIDED,
    Limit,
    Population,
    Requirements,
    UnitSample,
    decide_at_least,
    decide_at_most,
    qualify,
)


def test_decisions_are_three_way():
    assert decide_at_most(1.0, 2.0, 3.0) == PASS
    assert decide_at_most(3.5, 4.0, 3.0) == FAIL
    assert decide_at_most(2.0, 4.0, 3.0) == UNDECIDED
    assert decide_at_least(5.0, 9.0, 4.0) == PASS
    assert decide_at_least(1.0, 3.0, 4.0) == FAIL
    assert decide_at_least(3.0, 5.0, 4.0) == UNDECIDED


def test_requirements_from_the_shipped_spec():
    req = Requirements.from_spec(load_spec("VS-505"))
    by = {lim.metric: lim for lim in req.limits}
    assert by["make_bounce"].value == 3000.0 and by["make_bounce"].percentile == 95
    assert by["operate_time"].percentile == 100
    assert by["chatter"].value == pytest.approx(1 / 1000)
    assert req.life_cycles == 100_000 and req.confidence == 0.9 and req.life_percent == 10


@pytest.fixture(scope="module")
def many():
    # 16 units a lot, 6,000 recorded cycles each, life test to 300,000 cycles
    inc = draw("AG-MS5", 16, 6000, 300_000, seed=11)
    inc2 = draw("AG-MS5", 16, 6000, 300_000, seed=12)
    cand = draw("VS-505", 16, 6000, 300_000, seed=13)
    return inc, inc2, cand


def test_candidate_fails_where_the_truth_says_it_must(many):
    inc, _, cand = many
    req = Requirements.from_spec(load_spec("VS-505"))
    q = qualify(inc, cand, req, n_resamples=500)
    by = {c.name: c for c in q.criteria}
    # truth: VS-505 operate time is lognormal (median 6.9 ms, sigma 0.14), so a share
    # lognorm.sf(12 ms) = 3.9e-5 of operations exceeds the every-actuation limit of 12 ms
    share = stats.lognorm.sf(12_000, 0.14, scale=demo_population("VS-505").operate.median_us)
    assert share > 1e-5
    assert by["operate time max (candidate)"].outcome == FAIL
    assert q.outcome == FAIL and q.exit_code == 1
    # the bounce criteria agree with the model's true p95 (from a large draw of the same model)
    big = draw("VS-505", 24, 3000, 300_000, seed=99).samples
    for metric, limit in (("make_bounce", 3000.0), ("break_bounce", 8000.0)):
        truth = float(np.percentile(big[metric].values, 95))
        outcome = by[f"{metric.replace('_', ' ')} p95 (candidate)"].outcome
        assert outcome != (FAIL if truth <= limit else PASS)
    json.dumps(q.to_dict())  # the --json form is plain JSON


def test_same_supplier_passes(many):
    inc, inc2, _ = many
    req = Requirements.from_spec(load_spec("AG-MS5"))
    q = qualify(inc, inc2, req, n_resamples=500)
    # truth: the same population; B10 = 420,000 * (-ln 0.9)^(1/2.4) = 164,700 cycles >= 100,000
    pop = demo_population("AG-MS5")
    assert pop.life_scale * (-math.log(0.9)) ** (1 / pop.life_shape) > 150_000
    # limits the spec applies to each unit (every actuation's operate time, each unit's chatter): no
    # unit of 16 beyond shows at most 1 - 0.1^(1/16) = 13.4 % of units would be, not the 10 % a 90 %
    # reliability allows, so they wait for the success run's 22 units (n = ln(1 - C) / ln(R), rounded
    # up; common practice, see benchlog/stats/_planning.py); every other criterion passes
    unit_level = {"operate time max (candidate)", "chatter rate (candidate)"}
    for c in q.criteria:
        if c.name in unit_level:
            assert c.outcome == UNDECIDED and c.measured.endswith("0 of 16 units beyond"), c
            assert c.high == pytest.approx(1 - 0.1 ** (1 / 16)) and "22 units" in c.to_settle
        else:
            assert c.outcome == PASS, (c.name, c.measured, c.note)
    assert q.exit_code == 2
    # at 85 % reliability the success run needs ln(0.1) / ln(0.85) = 14.2, so 15 units: 16 decide it
    q85 = qualify(inc, inc2, Requirements.from_spec(load_spec("AG-MS5"), reliability=0.85), n_resamples=500)
    for c in q85.criteria:
        assert c.outcome == PASS, (c.name, c.measured, c.note)
    assert q85.exit_code == 0
    life = q.life[inc2.name]
    assert life["failures"] > 3 and life["suspensions"] > 3
    assert set(life["modes"]) <= {"welded", "missed_make", "chatter"}


def test_too_few_units_is_not_yet_decidable():
    inc = draw("AG-MS5", 3, 300, 20_000, seed=21)
    cand = draw("VS-505", 3, 300, 20_000, seed=22)
    q = qualify(inc, cand, Requirements.from_spec(load_spec("VS-505")), n_resamples=300)
    assert q.outcome == UNDECIDED and q.exit_code == 2
    assert all(c.outcome == UNDECIDED for c in q.criteria)
    life = next(c for c in q.criteria if c.name.startswith("B10"))
    assert "too few" in life.note
    # with an assumed shape the Weibayes bound is computed, still short of 100,000 after 20,000 cycles,
    # and the plan says how many more cycles on the running units would settle it
    q2 = qualify(inc, cand, Requirements.from_spec(load_spec("VS-505")), assumed_shape=2.0, n_resamples=300)
    life2 = next(c for c in q2.criteria if c.name.startswith("B10"))
    assert life2.outcome == UNDECIDED and "more cycles" in life2.to_settle


def test_statistical_fail_and_pass_on_a_percentile():
    rng = np.random.default_rng(4)
    unit = np.repeat(np.arange(20), 500)

    def pop(name, median):
        vals = median * np.exp(rng.normal(0, 0.1, 20)[unit] + rng.normal(0, 0.3, unit.size))
        return Population(name, {"make_bounce": UnitSample.of(vals, unit)})

    low, high = pop("low", 1000.0), pop("high", 2600.0)
    # truth: p95 = median * exp(1.645 * hypot(0.1, 0.3)) = 1.68 * median
    req = Requirements((Limit("make_bounce", 3000.0, 95.0),))
    ok = qualify(high, low, req, n_resamples=400)
    assert [c.outcome for c in ok.criteria] == [PASS, PASS]
    bad = qualify(low, high, req, n_resamples=400)
    assert [c.outcome for c in bad.criteria] == [FAIL, FAIL]


def _per_unit(values_by_unit: list[list[float]]) -> UnitSample:
    vals = np.concatenate([np.asarray(v, float) for v in values_by_unit])
    names = np.concatenate([[f"U{i}"] * len(v) for i, v in enumerate(values_by_unit)])
    return UnitSample.of(vals, names)


def _lot(samples: dict[str, UnitSample]) -> Population:
    return Population("lot", samples)


def test_a_unit_beyond_a_unit_level_limit_fails_the_lot_and_the_share_is_clopper_pearson():
    # chatter per cycle of 10 units, 100 cycles each; one unit chatters on 3 cycles: 0.03 > 1 / 1000
    quiet = [[0.0] * 100 for _ in range(9)]
    sample = _per_unit([*quiet, [1.0] * 3 + [0.0] * 97])
    req = Requirements((Limit("chatter", 1 / 1000, 100.0),), None, confidence=0.9)
    q = qualify(_lot({"chatter": sample}), _lot({"chatter": sample}), req, margin=None)
    (c,) = q.criteria
    assert c.outcome == FAIL and "1 of 10 units beyond" in c.measured
    # Clopper and Pearson (Biometrika 26, 1934): beta quantiles (scipy.stats.beta), one-sided at 90 %
    assert c.low == pytest.approx(stats.beta.ppf(0.1, 1, 10)) and c.high == pytest.approx(
        stats.beta.ppf(0.9, 2, 9)
    )
    assert c.estimate == pytest.approx(0.1) and c.threshold == pytest.approx(0.1)


def test_a_unit_level_criterion_passes_at_most_one_minus_confidence_at_the_guarded_share():
    # every unit of the population is beyond the limit with probability 1 - R = 0.1 (binomial
    # arithmetic throughout). At 22 units, the success run for R = C = 0.9, a pass needs all 22
    # within: probability 0.9^22 = 0.098 <= 0.1. At 16 units it may not pass at all: passing whenever
    # none of 16 is beyond, as the lot did before, passes 0.9^16 = 18.5 % of such lots. 600 lots each
    # (binomial SD about 1.2 points)
    rng = np.random.default_rng(5)
    req = Requirements((Limit("chatter", 1 / 1000, 100.0),), None, confidence=0.9)
    share = {}
    for units in (16, 22):
        passes = 0
        for _ in range(600):
            beyond = rng.random(units) < 0.1
            s = _per_unit([[0.0] * 9 + [1.0 if b else 0.0] for b in beyond])
            passes += qualify(_lot({"chatter": s}), _lot({"chatter": s}), req, margin=None).outcome == PASS
        share[units] = passes / 600
    assert share[16] <= 0.1 + 0.025 and share[22] <= 0.1 + 0.025, share
    assert share[22] >= 0.098 - 0.035, share  # a pass is possible: the success run is not refused


def test_a_chatter_comparison_waits_for_enough_units_a_lot():
    # chatter comes from the few units that chatter at all; with 8 units a lot the cluster bootstrap
    # of the difference covered 0.89 / 0.95 / 0.98 at a nominal 0.80 / 0.90 / 0.95, with 16 units
    # within 2.5 points (tests/benchmarks/bench_calibration.py --only chatter, against the simulator's
    # truth): below 16 units a lot the comparison is not stated, and says what would decide it
    rng = np.random.default_rng(8)
    req = Requirements((Limit("chatter", 1 / 1000, 100.0),), None, confidence=0.9)

    def lot(units: int) -> Population:
        return _lot({"chatter": _per_unit([(rng.random(200) < 0.0005).astype(float) for _ in range(units)])})

    small = qualify(lot(8), lot(16), req, margin=0.2)
    diff = small.criteria[-1]
    assert diff.name.endswith("candidate - incumbent") and diff.outcome == UNDECIDED
    assert math.isnan(diff.low) and "16 units in each lot (now 8)" in diff.to_settle
    big = qualify(lot(16), lot(16), req, margin=0.2)
    diff = big.criteria[-1]
    assert diff.name.endswith("candidate - incumbent") and not math.isnan(diff.low)
    assert "16 units in each lot" not in diff.to_settle
