"""The dashboard's chatter count per unit is the number of chatter events in the stored actuations
(from the rollups' totals), on SQLite and PostgreSQL; windows without a total fall back to a lower
bound."""

import math

import numpy as np
import pytest
from sqlalchemy import text

from benchlog.analysis import INCOMPLETE
from benchlog.store import Store
from benchlog.views.tui._data import TrendCache, read_run
from tests.store.conftest import _pg_schema

from ._build import actuations, register


@pytest.fixture(params=["sqlite", "postgresql"])
def url(request, tmp_path):
    if request.param == "sqlite":
        yield f"sqlite:///{tmp_path / 'chatter.sqlite'}"
        return
    with _pg_schema() as pg:
        yield pg


def test_dashboard_chatter_is_the_number_of_chatter_events(url):
    with Store.open(url) as store:
        units = register(store, "AG-MS5", "Ashgrove Components", "L-9", ["AG-101", "AG-102", "AG-103"])
        bench = store.register_bench("bench C")
        w = store.start_run(bench, dict(enumerate(units)), profile={}, rollup_window=50)
        a = actuations([0, 1, 2], 0, 499, seed=21)
        rng = np.random.default_rng(8)
        # many chattering actuations per window, some with several events: the old per-window
        # maximum would undercount here
        a["chatter"] = rng.choice([0, 0, 0, 0, 1, 2, 4], len(a))
        a["flags"][::17] |= INCOMPLETE  # incomplete actuations carry no measurements
        a["chatter"][(a["flags"] & INCOMPLETE) != 0] = 0
        for lo in range(0, 500, 120):
            w.add(actuations=a[(a["cycle"] >= lo) & (a["cycle"] < lo + 120)])
            w.flush()
        w.close("stopped")
        run_id = w.run_id

    with Store.open(url, readonly=True) as store:
        stored = store.actuations(runs=[run_id])
        detail = read_run(store, run_id, TrendCache(first_budget_s=math.inf))  # whole, however slow
        by_unit = {row.unit.id: row.chatter for row in detail.units}
        for unit in units:
            events = int(stored["chatter"][stored["unit_id"] == unit].sum())
            assert events > 0 and by_unit[unit] == events

    # a database from before the totals: NULL sums give the lower bound (sum of window maxima)
    with Store.open(url) as store, store.engine.begin() as c:
        c.execute(text('UPDATE rollups SET "sum" = NULL WHERE unit_id = :u'), {"u": units[0]})
        maxima = c.execute(
            text("SELECT sum(\"max\") FROM rollups WHERE unit_id = :u AND metric = 'chatter'"),
            {"u": units[0]},
        ).scalar()
    with Store.open(url, readonly=True) as store:
        detail = read_run(store, run_id, TrendCache(first_budget_s=math.inf))  # whole, however slow
        by_unit = {row.unit.id: row.chatter for row in detail.units}
        first = int(stored["chatter"][stored["unit_id"] == units[0]].sum())
        assert by_unit[units[0]] == int(maxima) < first
        assert by_unit[units[1]] == int(stored["chatter"][stored["unit_id"] == units[1]].sum())
