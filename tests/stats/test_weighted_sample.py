"""A weighted UnitSample (one value per histogram bin with its count, as read from the store's
summaries) gives every statistic exactly what the same values repeated give (numpy.repeat is the
reference)."""

from __future__ import annotations

import numpy as np
import pytest

from benchlog.stats import (
    UnitSample,
    capability,
    mean_ratio,
    percentile_ratio,
    pooled_mean,
    pooled_percentile,
    share_beyond,
)


def _pair(seed: int):
    rng = np.random.default_rng(seed)
    units = np.repeat(np.arange(6), 40)
    values = np.round(rng.gamma(2.0, 300.0, len(units)), 0)  # rounded: many repeated values
    weights = rng.integers(1, 9, len(units)).astype(float)
    labels = np.array([f"U{u}" for u in units])
    weighted = UnitSample.of(values, labels, weights)
    expanded = UnitSample.of(np.repeat(values, weights.astype(int)), np.repeat(labels, weights.astype(int)))
    return weighted, expanded


@pytest.mark.parametrize("seed", [0, 1])
def test_weighted_sample_equals_the_expanded_values(seed):
    w, e = _pair(seed)
    other_w, other_e = _pair(seed + 10)
    assert len(w) == len(e) and w.unit_names == e.unit_names
    for p in (0, 37.5, 50, 95, 99, 100):
        np.testing.assert_allclose(w.per_unit(p), e.per_unit(p), rtol=1e-12)
    np.testing.assert_allclose(w.per_unit_mean(), e.per_unit_mean(), rtol=1e-12)
    kw = dict(confidence=0.9, n_resamples=300, seed=4)
    for f in (
        lambda s, o: pooled_percentile(s, 95, **kw),
        lambda s, o: pooled_mean(s, **kw),
        lambda s, o: percentile_ratio(s, o, 90, **kw),
        lambda s, o: mean_ratio(s, o, **kw),
    ):
        a, b = f(w, other_w), f(e, other_e)
        np.testing.assert_allclose([a.estimate, a.low, a.high], [b.estimate, b.low, b.high], rtol=1e-9)
    ca, cb = capability(w, 3000.0, **kw), capability(e, 3000.0, **kw)
    np.testing.assert_allclose(
        [ca.ppk.estimate, ca.ppk.low, ca.ppk.high], [cb.ppk.estimate, cb.ppk.low, cb.ppk.high]
    )
    sa, sb = share_beyond(w, 1200.0, **kw), share_beyond(e, 1200.0, **kw)
    assert (sa.beyond, sa.total) == (sb.beyond, sb.total)
    np.testing.assert_allclose([sa.unit_low, sa.unit_high], [sb.unit_low, sb.unit_high], rtol=1e-9)
