"""Rollup totals (revision 0003): per window, the sum of each metric; old databases keep NULL sums."""

from datetime import UTC, datetime

import numpy as np
from sqlalchemy import MetaData, inspect

from benchlog.analysis._types import INCOMPLETE, MAKE
from benchlog.store import ROLLUP_METRICS, Store
from benchlog.store._engine import make_engine
from benchlog.store._migrate import current_revision, upgrade
from tests.store._data import actuations


def _run(store, window=10):
    part = store.register_part("AG-MS5", "Ashgrove Components")
    lot = store.register_lot(part, "L-31")
    units = [store.register_unit(lot, f"AG-{i:03d}") for i in range(2)]
    bench = store.register_bench("bench S")
    writer = store.start_run(bench, dict(enumerate(units)), profile={}, rollup_window=window)
    return units, writer


def test_window_sums_equal_numpy_sums_of_the_stored_actuations(store):
    units, w = _run(store, window=10)
    a = actuations([0, 1], range(47), seed=5)
    rng = np.random.default_rng(9)
    a["chatter"] = rng.choice([0, 0, 0, 1, 2, 3], len(a))  # several chattering actuations per window
    a["glitches"] = rng.integers(0, 3, len(a))
    a["bounce_us"][::7] = np.nan
    a["flags"][::11] |= INCOMPLETE  # left out of every rollup figure, sum included
    for lo in range(0, 47, 9):  # uneven batches: windows are finished across flushes
        w.add(actuations=a[(a["cycle"] >= lo) & (a["cycle"] < lo + 9)])
        w.flush()
    w.close("stopped")
    stored = store.actuations()
    stored = stored[(stored["flags"] & INCOMPLETE) == 0]
    for unit in units:
        for kind in ("make", "break"):
            k = 0 if kind == "make" else 1
            mine = stored[(stored["unit_id"] == unit) & (stored["kind"] == k)]
            for metric in ("chatter", "glitches", "bounce_count", "bounce_us", "transfer_us"):
                tr = store.trend(unit, metric, kind=kind)
                assert len(tr) == 5 and tr.sum.dtype == np.float64
                for i in range(len(tr)):
                    v = mine[metric][(mine["cycle"] >= tr.cycle_lo[i]) & (mine["cycle"] <= tr.cycle_hi[i])]
                    # reference: numpy.nansum (all-NaN windows, like transfer_us here, sum to 0)
                    np.testing.assert_allclose(tr.sum[i], np.nansum(v), rtol=1e-12, err_msg=metric)
            chatter = store.trend(unit, "chatter", kind=kind)
            assert chatter.sum.sum() == mine["chatter"].sum()  # exact event count over the life
    latest = {ru.channel: ru.latest for ru in store.run_units(w.run_id)}
    last = stored[(stored["unit_id"] == units[1]) & (stored["kind"] == MAKE) & (stored["cycle"] >= 40)]
    assert latest[1][("make", "chatter")].sum == last["chatter"].sum()
    assert set(latest[0]) == {(k, m) for k in ("make", "break") for m in ROLLUP_METRICS}


def test_database_at_0002_with_data_upgrades_to_head_keeping_it(db_url):
    engine = make_engine(db_url)
    try:
        upgrade(engine, "0002")
        assert current_revision(engine) == "0002"
        assert "sum" not in {c["name"] for c in inspect(engine).get_columns("rollups")}
        md = MetaData()
        md.reflect(engine)
        t = md.tables
        now = datetime(2026, 11, 30, 22, 0, tzinfo=UTC)
        with engine.begin() as c:
            part = c.execute(
                t["parts"]
                .insert()
                .values(part_number="AG-R12", supplier="Ashgrove Components", created_at=now)
            ).inserted_primary_key[0]
            lot = c.execute(
                t["lots"].insert().values(part_id=part, code="N-4", created_at=now)
            ).inserted_primary_key[0]
            unit = c.execute(
                t["units"].insert().values(lot_id=lot, serial="R12-007", notes="", created_at=now)
            ).inserted_primary_key[0]
            bench = c.execute(
                t["benches"].insert().values(name="bench N", created_at=now)
            ).inserted_primary_key[0]
            run = c.execute(
                t["runs"]
                .insert()
                .values(
                    bench_id=bench,
                    started_at=now,
                    ended_at=now,
                    end_reason="stopped",
                    end_detail="",
                    profile={},
                    target_cycles=0,
                    cycles_done=20,
                    rate_cps=10.0,
                    software_version="0.0",
                    rollup_window=10,
                    fail_after=5,
                    t_offset_ns=0,
                    segments=1,
                    note="before the upgrade",
                )
            ).inserted_primary_key[0]
            c.execute(
                t["run_units"]
                .insert()
                .values(run_id=run, channel=0, unit_id=unit, cycle_base=0, cycles_done=20)
            )
            c.execute(
                t["rollups"].insert(),
                [
                    dict(
                        unit_id=unit,
                        metric="chatter",
                        kind=0,
                        run_id=run,
                        window_no=w,
                        cycle_lo=10 * w,
                        cycle_hi=10 * w + 9,
                        count=10,
                        p50=0.0,
                        p95=1.0,
                        max=mx,
                    )
                    for w, mx in ((0, 2.0), (1, 1.0))
                ],
            )
    finally:
        engine.dispose()

    store = Store.open(db_url)  # upgrades to head, never recreates
    try:
        assert current_revision(store.engine) == "0007"
        assert store.run(run).note == "before the upgrade"
        tr = store.trend(unit, "chatter", kind="make")
        assert list(tr.cycle_lo) == [0, 10] and list(tr.max) == [2.0, 1.0] and list(tr.count) == [10, 10]
        assert np.isnan(tr.sum).all()  # rows from before 0003 have no total
        (ru,) = store.run_units(run)
        assert np.isnan(ru.latest[("make", "chatter")].sum)
        # new windows written after the upgrade carry their totals
        w = store.start_run(bench, {0: unit}, profile={}, rollup_window=10)
        a = actuations([0], range(10), seed=2)
        a["chatter"] = 1
        w.add(actuations=a)
        w.close("stopped")
        assert list(store.trend(unit, "chatter", kind="make", run_id=w.run_id).sum) == [10.0]
    finally:
        store.close()
