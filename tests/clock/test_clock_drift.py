"""The drift estimator takes beats one at a time (live) or a batch's beats at once (a replay): the pairs
it keeps, and so its estimate, must not depend on which."""

from __future__ import annotations

import numpy as np

from benchlog.clock import DriftEstimator
from benchlog.clock._drift import MAX_KEPT


def _state(d: DriftEstimator) -> tuple:
    return d._host, d._sampler, d._step, d._seen


def test_pairs_added_in_batches_keep_what_one_at_a_time_keeps():
    rng = np.random.default_rng(5)
    for _ in range(20):
        n = int(rng.integers(1, 5 * MAX_KEPT))
        host = np.cumsum(rng.integers(1, 300_000_000, n))
        sampler = host + rng.integers(-50_000, 50_000, n)
        one, many = DriftEstimator(), DriftEstimator()
        for h, s in zip(host.tolist(), sampler.tolist(), strict=True):
            one.add(h, s)
        cuts = np.sort(rng.integers(0, n + 1, int(rng.integers(0, 12))))
        for part_h, part_s in zip(np.split(host, cuts), np.split(sampler, cuts), strict=True):
            many.add_many(part_h.tolist(), part_s.tolist())
        assert _state(many) == _state(one)
        assert many.ppm() == one.ppm()
