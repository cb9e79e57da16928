"""The operating characteristic of a comparison: how often `qualify` would pass the candidate, as a
function of its true difference from the incumbent, for a planned number of units.

Populations are simulated from the random-unit-effect model (`_unit_effect`): a unit's median is
log-normal about the lot's (log-sd `sigma`), and its actuations are its median times residuals drawn
from a residual distribution - the incumbent's recorded one, or a log-normal one when only a spec is
known. The candidate is the same with every value multiplied by the true ratio. Each simulated pair is
judged by `percentile_ratio` and `decide_at_most`, as the criterion in `qualify` is.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from benchlog.errors import DataError
from benchlog.stats._compare import UnitSample
from benchlog.stats._unit_effect import UnitEffect, median_noise, pivots
from benchlog.stats._verdict import PASS, decide_at_most

__all__ = ["Characteristic", "operating_characteristic", "UnitModel"]

DEFAULT_RATIOS = (0.8, 0.9, 1.0, 1.1, 1.2, 1.3, 1.4, 1.5)
MAX_VALUES_PER_UNIT = 200  # more actuations of the same units change the ratio's bounds little


@dataclass(frozen=True)
class UnitModel:
    """What a simulated lot is drawn from: log-sd of unit medians and residuals (value / unit median)."""

    sigma: float
    residuals: np.ndarray
    source: str

    @classmethod
    def from_sample(cls, sample: UnitSample) -> UnitModel:
        model = UnitEffect.of(sample)
        if model is None or sample.n_units < 3:
            raise DataError("the incumbent's data give no unit model (a unit's median is 0, or < 3 units)")
        return cls(model.sigma, model.residuals, f"the incumbent's {sample.n_units} recorded units")

    @classmethod
    def assumed(cls, sigma: float = 0.25, within: float = 0.4) -> UnitModel:
        from scipy.stats import norm

        r = np.exp(within * norm.ppf((np.arange(256) + 0.5) / 256))
        return cls(sigma, r, f"assumed: unit log-sd {sigma:g}, log-normal actuations of log-sd {within:g}")


@dataclass(frozen=True)
class Characteristic:
    ratios: tuple[float, ...]
    units: tuple[int, ...]
    pass_share: np.ndarray  # (len(units), len(ratios))
    populations: int
    margin: float
    confidence: float
    percentile: float
    model: UnitModel


def _lot_medians(rng, model: UnitModel, pops: int, units: int, values: int, scale: float) -> np.ndarray:
    """(pops, units) log medians of simulated units: each unit's own median of `values` actuations."""
    med = scale * np.exp(model.sigma * rng.standard_normal((pops, units)))
    r = rng.choice(model.residuals, (pops, units, values))
    return np.log(med * np.median(r, axis=2))


def operating_characteristic(
    model: UnitModel,
    units: tuple[int, ...] = (8, 16, 32),
    ratios: tuple[float, ...] = DEFAULT_RATIOS,
    *,
    cycles: int = 1000,
    margin: float = 0.2,
    confidence: float = 0.9,
    percentile: float = 95.0,
    populations: int = 400,
    draws: int = 1000,
    seed: int = 0,
    progress: Callable[[int, int], None] | None = None,
) -> Characteristic:
    """P(PASS) of "candidate / incumbent percentile <= 1 + margin" at each (units, true ratio).

    Each simulated pair of lots is judged as `percentile_ratio` judges recorded ones (the unit-effect
    model's pivotal draws, bounds at `confidence`, `decide_at_most` against 1 + margin), vectorised
    over the populations, with the residual distribution taken as known: with hundreds of actuations
    per unit its estimate barely moves between lots.
    """
    rng = np.random.default_rng(seed)
    values = max(20, min(int(cycles), MAX_VALUES_PER_UNIT))
    effect = UnitEffect.from_parts(0.0, model.sigma, 2, model.residuals)
    noise = float(median_noise(effect.residuals, np.array([values]))[0])  # as UnitEffect of a lot
    out = np.zeros((len(units), len(ratios)))
    total = len(units) * len(ratios)
    done = 0
    for i, n in enumerate(units):
        for j, d in enumerate(ratios):
            logs = [_lot_medians(rng, model, populations, n, values, s) for s in (d, 1.0)]
            q = []
            for y in logs:
                ybar, s = y.mean(axis=1), y.std(axis=1, ddof=1)
                u = rng.chisquare(n - 1, (populations, draws))
                z = rng.standard_normal((populations, draws))
                q.append(pivots(ybar[:, None], s[:, None], noise, n, u, z))
            top = max(float(q[0][1].max()), float(q[1][1].max()))
            grid = np.linspace(0.0, top, 97)
            g = effect.scale_quantile(grid, percentile / 100.0)
            log_ratio = (q[0][0] + np.interp(q[0][1], grid, g)) - (q[1][0] + np.interp(q[1][1], grid, g))
            high = np.exp(np.quantile(log_ratio, confidence, axis=1))
            low = np.exp(np.quantile(log_ratio, 1.0 - confidence, axis=1))
            out[i, j] = np.mean(
                [decide_at_most(lo, hi, 1.0 + margin) == PASS for lo, hi in zip(low, high, strict=True)]
            )
            done += 1
            if progress is not None:
                progress(done, total)
    return Characteristic(
        tuple(ratios), tuple(units), out, populations, margin, confidence, percentile, model
    )
