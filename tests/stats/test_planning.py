import math

import numpy as np
import pytest

from benchlog.errors import DataError
from benchlog.stats import (
    LifeTable,
    life_top_up,
    success_run_units,
    weibayes_bx_lower,
    weibayes_test_cycles,
    weibayes_units,
)


@pytest.mark.parametrize(
    ("confidence", "reliability", "units"),
    # success-run formula n = ln(1 - C) / ln(R), rounded up (common practice; the familiar table values,
    # e.g. O'Connor and Kleyner, Practical Reliability Engineering; from memory)
    [(0.90, 0.90, 22), (0.95, 0.90, 29), (0.90, 0.95, 45), (0.95, 0.95, 59), (0.90, 0.99, 230)],
)
def test_success_run(confidence, reliability, units):
    assert success_run_units(confidence, reliability) == units
    assert units - 1 < math.log(1 - confidence) / math.log(reliability) <= units


def test_success_run_with_one_failure_allowed():
    # C = 90 %, R = 90 %, one failure allowed: 38 units (binomial, cumulative; from memory)
    assert success_run_units(0.9, 0.9, failures_allowed=1) == 38


def test_weibayes_reduces_to_success_run():
    # shape 1 and a test as long as the life: the Weibayes count is the success-run count
    assert weibayes_units(100_000, 100_000, 0.9, 0.9, 1.0) == success_run_units(0.9, 0.9)
    # and any shape at t = L
    assert weibayes_units(100_000, 100_000, 0.9, 0.9, 3.0) == 22


def test_weibayes_closed_form_and_trade():
    beta, life, n = 2.0, 100_000.0, 16
    t = weibayes_test_cycles(n, life, 0.9, 0.9, beta)
    # t = L * (ln(1 - C) / (n ln R))^(1/beta)
    assert t == pytest.approx(life * (math.log(0.1) / (n * math.log(0.9))) ** (1 / beta))
    # n1 t1^beta = n2 t2^beta
    assert weibayes_test_cycles(4 * n, life, 0.9, 0.9, beta) == pytest.approx(t / 2)
    # running n units to t with no failure gives a Weibayes B10 lower bound of exactly L
    table = LifeTable.of([(i, t, False, "") for i in range(n)])
    assert weibayes_bx_lower(table, beta, 10, 0.9) == pytest.approx(life)


def test_weibayes_with_failures_needs_more():
    t0 = weibayes_test_cycles(16, 1e5, 0.9, 0.9, 2.0)
    t1 = weibayes_test_cycles(16, 1e5, 0.9, 0.9, 2.0, failures_allowed=1)
    assert t1 > t0


def test_life_top_up_reaches_the_bound():
    cycles = np.array([30_000.0, 40_000.0, 50_000.0, 50_000.0, 50_000.0, 50_000.0])
    failed = np.array([True, False, False, False, False, False])
    top = life_top_up(cycles, failed, 100_000, 0.9, 0.9, 2.0)
    assert top.survivors == 5 and top.failures == 1
    after = cycles + np.where(failed, 0, top.more_cycles)
    table = LifeTable(np.arange(6).astype(object), after, failed, np.where(failed, "w", "").astype(object))
    assert weibayes_bx_lower(table, 2.0, 10, 0.9) == pytest.approx(100_000, rel=1e-4)


def test_planning_rejects_impossible_input():
    with pytest.raises(DataError):
        success_run_units(1.0, 0.9)
    with pytest.raises(DataError):
        weibayes_test_cycles(0, 1e5, 0.9, 0.9, 2.0)
