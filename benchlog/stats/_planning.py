"""Test planning: how many units and cycles a demonstration needs, and what would settle a running test.

Success run (zero failures, attribute data): n units all surviving the test show reliability R at
confidence C when R^n <= 1 - C, so n = ln(1 - C) / ln(R), rounded up (the success-run formula, common
practice; e.g. O'Connor and Kleyner, *Practical Reliability Engineering*, 5th ed., from memory). With up
to r failures allowed, n is the least with binom.cdf(r; n, 1 - R) <= 1 - C.

Weibayes (shape beta assumed known): testing n units for t cycles each with zero failures demonstrates
a Bx life L at confidence C when the Weibayes lower bound on the scale,
eta_low = t * (n / -ln(1 - C))^(1/beta), reaches L / (-ln R)^(1/beta), R = 1 - x. Solved for t:

    t = L * ( ln(1 - C) / (n * ln R) )^(1/beta)

With beta = 1 and t = L this is the success-run formula again; n1 t1^beta = n2 t2^beta is the trade of
units against test length (the parametric binomial / Lipson equality; Abernethy, *The New Weibull
Handbook*, 5th ed., ch. 6, from memory). With r failures allowed the chi-square quantile with 2r + 2
degrees of freedom replaces -2 ln(1 - C): n t^beta = L^beta * chi2(C, 2r + 2) / (2 * -ln R).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize, stats

from benchlog.errors import DataError

__all__ = [
    "success_run_units",
    "weibayes_test_cycles",
    "weibayes_units",
    "LifeTopUp",
    "life_top_up",
    "units_to_settle",
]


def _check_cr(confidence: float, reliability: float) -> None:
    if not 0.0 < confidence < 1.0:
        raise DataError(f"confidence must be between 0 and 1, got {confidence}")
    if not 0.0 < reliability < 1.0:
        raise DataError(f"reliability must be between 0 and 1, got {reliability}")


def success_run_units(confidence: float, reliability: float, failures_allowed: int = 0) -> int:
    """Units to test to show `reliability` at `confidence` with at most `failures_allowed` failures."""
    _check_cr(confidence, reliability)
    if failures_allowed < 0:
        raise DataError("failures allowed cannot be negative")
    if failures_allowed == 0:
        # the tiny tolerance keeps an exact integer (e.g. C = 0.9, R = 0.1**(1/22)) from rounding up
        return math.ceil(math.log1p(-confidence) / math.log(reliability) - 1e-9)
    n = failures_allowed + 1
    while stats.binom.cdf(failures_allowed, n, 1.0 - reliability) > 1.0 - confidence:
        n += 1
    return n


def _weibayes_product(
    life: float, reliability: float, confidence: float, shape: float, failures_allowed: int
) -> float:
    """The n * t^beta a Weibayes demonstration needs (in cycles^beta)."""
    _check_cr(confidence, reliability)
    if shape <= 0 or life <= 0:
        raise DataError("life and Weibull shape must be positive")
    q = stats.chi2.ppf(confidence, 2 * failures_allowed + 2) / 2.0  # = -ln(1 - C) when r = 0
    return life**shape * q / -math.log(reliability)


def weibayes_test_cycles(
    units: int, life: float, reliability: float, confidence: float, shape: float, failures_allowed: int = 0
) -> float:
    """Cycles each of `units` units must run (with at most `failures_allowed` failures) to show that
    reliability at `life` cycles is at least `reliability` with `confidence`, Weibull shape `shape`."""
    if units < 1:
        raise DataError("at least one unit is needed")
    return (_weibayes_product(life, reliability, confidence, shape, failures_allowed) / units) ** (1 / shape)


def weibayes_units(
    test_cycles: float,
    life: float,
    reliability: float,
    confidence: float,
    shape: float,
    failures_allowed: int = 0,
) -> int:
    """Units needed when each can run `test_cycles` cycles."""
    if test_cycles <= 0:
        raise DataError("test length must be positive")
    need = _weibayes_product(life, reliability, confidence, shape, failures_allowed) / test_cycles**shape
    return max(failures_allowed + 1, math.ceil(need - 1e-9))


@dataclass(frozen=True)
class LifeTopUp:
    """What more cycling on the units still running would show, if none of them fails meanwhile."""

    more_cycles: float  # per surviving unit; inf when the survivors alone cannot get there
    survivors: int
    shape: float
    failures: int


def life_top_up(
    cycles: np.ndarray, failed: np.ndarray, life: float, reliability: float, confidence: float, shape: float
) -> LifeTopUp:
    """Further cycles on every surviving unit, with no further failure, that would lift the Weibayes
    lower bound of the life at `reliability` to `life` (chi-square with 2r + 2 dof for r failures)."""
    cycles = np.asarray(cycles, np.float64)
    failed = np.asarray(failed, bool)
    r = int(failed.sum())
    need = _weibayes_product(life, reliability, confidence, shape, r)
    alive = cycles[~failed]

    def have(extra: float) -> float:
        return float(np.sum(cycles[failed] ** shape) + np.sum((alive + extra) ** shape))

    if have(0.0) >= need:
        return LifeTopUp(0.0, len(alive), shape, r)
    if len(alive) == 0:
        return LifeTopUp(math.inf, 0, shape, r)
    hi = max(life, 1.0)
    while have(hi) < need:
        hi *= 2.0
    extra = optimize.brentq(lambda e: have(e) - need, 0.0, hi, xtol=0.5)
    return LifeTopUp(float(math.ceil(extra)), len(alive), shape, r)


def units_to_settle(estimate: float, low: float, high: float, limit: float, units: int) -> int | None:
    """Rough total units that would settle a bootstrap criterion, if the estimate stayed where it is.

    Interval half-widths shrink about as 1 / sqrt(units); the answer is the unit count at which the
    bound on the limit's side would no longer reach the limit. None when the estimate sits on the limit
    (no number of units settles it) or the interval is degenerate.
    """
    gap = abs(limit - estimate)
    half = (high - estimate) if limit >= estimate else (estimate - low)
    if not (math.isfinite(gap) and math.isfinite(half)) or gap == 0 or half <= 0:
        return None
    return max(units, math.ceil(units * (half / gap) ** 2))
