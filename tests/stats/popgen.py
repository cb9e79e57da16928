"""Populations with known true parameters, drawn per the simulator's model of a supplier's units.

Each unit gets its own median bounce (lognormal between units), its actuations scatter lognormally
about it, chatter is Poisson at a per-unit rate, and its life is Weibull, suspended at the test's end.
Used only where benchlog.sim is not needed: these are invented numbers for checking that the verdict
follows the truth, never a reference value.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from benchlog.analysis import BREAK, MAKE, empty_actuations
from benchlog.stats import LifeTable


@dataclass(frozen=True)
class Truth:
    make_median_us: float
    break_median_us: float
    operate_median_us: float
    between_sigma: float  # log-sd of unit medians
    within_sigma: float  # log-sd of one unit's actuations
    chatter_per_cycle: float
    weibull_shape: float
    weibull_scale: float

    def pooled_percentile(self, which: str, q: float) -> float:
        """True population percentile of the lognormal-of-lognormal model (a lognormal)."""
        med = {"make": self.make_median_us, "break": self.break_median_us, "operate": self.operate_median_us}[
            which
        ]
        sigma = np.hypot(self.between_sigma, self.within_sigma)
        return float(stats.lognorm.ppf(q / 100, sigma, scale=med))

    def b(self, percent: float) -> float:
        return self.weibull_scale * (-np.log1p(-percent / 100)) ** (1 / self.weibull_shape)


def draw(truth: Truth, units: int, cycles: int, test_end: float, seed: int, prefix: str = "U"):
    rng = np.random.default_rng(seed)
    names = np.array([f"{prefix}{i:02d}" for i in range(units)], dtype=object)
    a = empty_actuations(2 * units * cycles)
    unit = np.repeat(names, 2 * cycles)
    a["kind"] = np.tile(np.repeat([MAKE, BREAK], 1)[None, :].repeat(cycles, 0).ravel(), units)
    a["cycle"] = np.tile(np.repeat(np.arange(cycles), 2), units)
    for key, kind, med in (
        ("bounce_us", MAKE, truth.make_median_us),
        ("bounce_us", BREAK, truth.break_median_us),
        ("transit_us", MAKE, truth.operate_median_us),
    ):
        unit_med = np.log(med) + rng.normal(0, truth.between_sigma, units)
        rows = a["kind"] == kind
        per = np.repeat(unit_med, cycles)
        a[key][rows] = np.exp(per + rng.normal(0, truth.within_sigma, units * cycles))
    a["transit_us"][a["kind"] == BREAK] = np.nan
    a["drive_level"] = np.where(a["kind"] == MAKE, 1, 0)  # normally open contact: drive on -> make
    rate = rng.gamma(4.0, truth.chatter_per_cycle / 4.0, units) / 2
    a["chatter"] = rng.poisson(np.repeat(rate, 2 * cycles))
    life = truth.weibull_scale * rng.weibull(truth.weibull_shape, units)
    failed = life <= test_end
    modes = rng.choice(["welded", "missed make"], units, p=[0.6, 0.4])
    table = LifeTable(names, np.minimum(life, test_end), failed, np.where(failed, modes, "").astype(object))
    return a, unit, table
