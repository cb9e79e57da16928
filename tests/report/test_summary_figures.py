"""Every figure `qualify` reports from the store's distribution summaries agrees with the figure
computed from the raw actuations: exactly for counts, rates, maxima and life, and within the store's
stated resolution (docs/store.md) for percentiles and their ratios."""

from __future__ import annotations

import math

import numpy as np
import pytest
from storefill import fill

from benchlog.stats import Population, Requirements, metric_samples, qualify
from benchlog.store import RESOLUTION, Store
from benchlog.views.report import load_lot, resolve_lot, spec_for

LOTS = ("AG-MS5:L1", "VS-505:L1")


@pytest.fixture(scope="module")
def lab(tmp_path_factory):
    return fill(tmp_path_factory.mktemp("store") / "lab.sqlite", units_per_lot=8, recorded=400, seed=1)


def _raw_population(store, ident: str, lot) -> Population:
    """The population as it was built before summaries: every actuation through metric_samples."""
    _, lots = resolve_lot(store, ident)
    acts = store.actuations(lots=[lo.id for lo in lots])
    labels = np.array([lot.serial_of[int(u)] for u in acts["unit_id"]])
    return Population(lot.population.name, metric_samples(acts, labels), lot.population.life)


def test_per_unit_figures_agree_with_numpy_on_the_raw_actuations(lab):
    store = Store.open(lab, readonly=True)
    try:
        for ident in LOTS:
            lot = load_lot(store, ident, with_runs=False)
            raw = _raw_population(store, ident, lot).samples
            for key, s in lot.population.samples.items():
                r = raw[key]
                assert s.unit_names == r.unit_names, key
                assert np.array_equal(s.unit_counts(), r.unit_counts()), key  # counts exact
                np.testing.assert_allclose(s.per_unit_mean(), r.per_unit_mean(), rtol=1e-12)
                np.testing.assert_array_equal(s.per_unit(100), r.per_unit(100))  # maxima exact
                for p in (50, 95, 99):
                    # numpy.percentile of each unit's raw values is the reference
                    want = np.array([np.percentile(r.values[r.unit == u], p) for u in range(r.n_units)])
                    assert np.all(np.abs(s.per_unit(p) - want) <= RESOLUTION * np.abs(want) + 1e-12), (key, p)
    finally:
        store.close()


def test_every_qualification_figure_agrees_with_the_raw_actuations(lab):
    store = Store.open(lab, readonly=True)
    try:
        lots = [load_lot(store, ident, with_runs=False) for ident in LOTS]
        raws = [_raw_population(store, ident, lot) for ident, lot in zip(LOTS, lots, strict=True)]
    finally:
        store.close()
    spec, _ = spec_for(None, lots[1])
    req = Requirements.from_spec(spec)
    kw = dict(margin=0.2, n_resamples=400, seed=3)
    from_summaries = qualify(lots[0].population, lots[1].population, req, **kw)
    from_rows = qualify(raws[0], raws[1], req, **kw)
    ratio_tol = (1 + RESOLUTION) / (1 - RESOLUTION) - 1  # a ratio of two figures each within RESOLUTION
    assert len(from_summaries.criteria) == len(from_rows.criteria) >= 6
    for s, r in zip(from_summaries.criteria, from_rows.criteria, strict=True):
        assert s.name == r.name
        assert s.outcome == r.outcome, s.name
        if s.name.startswith(("chatter", "B10")) or "life" in s.name or " max " in s.name:
            tol = 1e-12  # counts, per-cycle rates, maxima, life: exact
        elif "/" in s.name:
            tol = ratio_tol
        else:
            tol = RESOLUTION
        for f in ("estimate", "low", "high"):
            a, b = getattr(s, f), getattr(r, f)
            if math.isnan(b):
                assert math.isnan(a), (s.name, f)
            else:
                assert abs(a - b) <= tol * abs(b) + 1e-12, (s.name, f, a, b)
