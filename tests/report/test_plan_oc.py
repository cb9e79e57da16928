"""`benchlog plan --oc --incumbent LOT`: the characteristic simulated from the incumbent's recorded units."""

import numpy as np
import pytest
from storefill import fill

from benchlog.stats import UnitModel
from benchlog.store import Store
from benchlog.views.cli import main
from benchlog.views.report._data import load_lot


def test_plan_oc_from_the_incumbents_recorded_units(tmp_path, capsys):
    db = fill(tmp_path / "lab.sqlite", units_per_lot=6, recorded=60, test_end=20_000, seed=3)
    code = main(["plan", "--oc", "--incumbent", "AG-MS5:L1", "--db", db, "--populations", "30"])
    out = capsys.readouterr().out
    assert code == 0
    assert "units drawn from the incumbent's 6 recorded units" in out
    with Store.open(db, readonly=True) as store:
        sample = load_lot(store, "AG-MS5:L1", with_runs=False).population.samples["make_bounce"]
    # the model's unit spread is the log-sd of the units' own medians (numpy as the reference)
    # (a sample read from the store's summaries carries a count per value: numpy.repeat expands it)
    counts = np.ones(len(sample.values), int) if sample.weights is None else sample.weights.astype(int)
    values, unit = np.repeat(sample.values, counts), np.repeat(sample.unit, counts)
    med = [np.median(values[unit == u]) for u in range(sample.n_units)]
    # less the medians' own sampling noise tau^2 (the model's `noise`, held to the median's order
    # statistic by tests/stats): sigma^2 = s^2 - tau^2, the one-way random-effects split
    from benchlog.stats._unit_effect import UnitEffect

    spread = np.std(np.log(med), ddof=1)
    model = UnitEffect.of(sample)
    assert model.spread == pytest.approx(spread)
    want = np.sqrt(max(spread**2 - model.noise, 0.0))
    assert UnitModel.from_sample(sample).sigma == pytest.approx(want)
