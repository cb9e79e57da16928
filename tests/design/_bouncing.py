"""Bouncing contacts with a known bounce-time distribution, for end-to-end checks of the designer.

Every make and break starts with a first transition and ends exactly `bounce` later with the edge into
the final state; between them, `k` excursions back to the old state at random places. Bounce times are
drawn from a lognormal whose parameters the test knows, so the true tail quantile is known exactly.
"""

from __future__ import annotations

import numpy as np

from benchlog.events import TimedEdges


def bouncing(
    cycles: int,
    period_ns: int,
    make_mu: float,
    make_sigma: float,
    break_mu: float,
    break_sigma: float,
    seed: int = 0,
    channel: int = 0,
    excursions: int = 3,
) -> TimedEdges:
    """`cycles` make/break pairs; bounce times (ns) lognormal(mu, sigma) of ln(ns)."""
    rng = np.random.default_rng(seed)
    n = 2 * cycles
    starts = np.arange(n) * (period_ns // 2) + period_ns + rng.integers(0, period_ns // 20, n)
    kind_make = (np.arange(n) % 2) == 0
    mu = np.where(kind_make, make_mu, break_mu)
    sigma = np.where(kind_make, make_sigma, break_sigma)
    bounce = np.minimum(np.exp(mu + sigma * rng.standard_normal(n)), period_ns / 2 * 0.6).astype(np.int64)
    bounce = np.maximum(bounce, 4 * excursions + 4)
    k = excursions
    # k excursions: 2k - 1 inner edges at sorted uniform positions inside (0, bounce), then the settle edge
    inner = np.sort(rng.uniform(0.05, 0.95, (n, 2 * k - 1)), axis=1) * bounce[:, None]
    t = np.concatenate(
        (starts[:, None], starts[:, None] + inner.astype(np.int64), (starts + bounce)[:, None]), axis=1
    )
    new_level = np.where(kind_make, 1, 0)[:, None]
    lv = np.empty_like(t, dtype=np.uint8)
    lv[:, 0::2] = new_level
    lv[:, 1::2] = 1 - new_level
    t = np.maximum.accumulate(t, axis=1)  # ties stay in order
    tt = t.ravel()
    return TimedEdges(tt.astype(np.int64), np.full(len(tt), channel, np.uint8), lv.ravel())
