"""One actuation per unit, cycle and kind: numbered right at a resume boundary, enforced by the schema."""

from __future__ import annotations

import numpy as np
import pytest
from sqlalchemy import text

from benchlog.analysis._types import BREAK, MAKE
from benchlog.store import Store, head_revision
from benchlog.store._engine import make_engine
from benchlog.store._migrate import upgrade
from benchlog.store._write import bulk_insert_actuations, to_stored
from tests.store._data import actuations, downgrade_to


def _bench(store):
    part = store.register_part("AG-R12", "Ashgrove Components")
    unit = store.register_unit(store.register_lot(part, "L1"), "R-001")
    return store.register_bench("bench B"), unit


def _leading_break(period_ns: int = 100_000_000) -> np.ndarray:
    """A segment that opens on a break: as the analysis numbers it, cycle 0 like the cycle after it."""
    head = actuations([0], [0])[1:]  # the break alone
    rest = actuations([0], range(2))
    rest["t_start_ns"] += period_ns
    return np.concatenate([head, rest])


def _pairs(store, unit):
    got = store.actuations(units=[unit])
    return sorted(zip(got["cycle"].tolist(), got["kind"].tolist(), strict=True))


def test_a_resume_opening_on_a_break_gives_it_the_cycle_whose_make_is_stored(store):
    bench, unit = _bench(store)
    w = store.start_run(bench, {0: unit}, profile={}, rollup_window=10)
    first = actuations([0], range(4))[:-1]  # cycles 0-3, killed after the make of cycle 3
    w.add(actuations=first)
    w.flush()
    w.abandon()
    store.release_bench(bench, w.lease_token)  # as when the killed recorder's process is gone
    w = store.resume_run(w.run_id)
    w.add(actuations=_leading_break())
    w.flush()
    assert w.life_cycle(0, 1) == 5
    w.close("stopped")
    pairs = _pairs(store, unit)
    assert len(pairs) == len(set(pairs)) == 12
    assert pairs == [(c, k) for c in range(6) for k in sorted((MAKE, BREAK))]
    assert store.run(w.run_id).cycles_done == 6


def test_a_resume_opening_on_a_break_after_a_whole_cycle_counts_a_cycle_of_its_own(store):
    bench, unit = _bench(store)
    w = store.start_run(bench, {0: unit}, profile={}, rollup_window=10)
    w.add(actuations=actuations([0], range(4)))  # cycles 0-3 whole
    w.flush()
    w.abandon()
    store.release_bench(bench, w.lease_token)
    w = store.resume_run(w.run_id)
    w.add(actuations=_leading_break())
    w.flush()
    w.close("stopped")
    pairs = _pairs(store, unit)
    assert len(pairs) == len(set(pairs))
    # cycle 4 lost its make while nothing recorded; 5 and 6 follow
    assert pairs[-5:] == [(4, BREAK), (5, MAKE), (5, BREAK), (6, MAKE), (6, BREAK)]
    assert store.run(w.run_id).cycles_done == 7


def test_the_schema_refuses_a_second_row_of_the_same_cycle_and_kind(store):
    bench, unit = _bench(store)
    w = store.start_run(bench, {0: unit}, profile={})
    w.add(actuations=actuations([0], range(2)))
    w.flush()
    w.close("stopped")
    again = to_stored(actuations([0], [1]), np.array([unit, unit]), w.run_id)
    with pytest.raises(Exception, match="(?i)unique|duplicate"), store.engine.begin() as c:
        bulk_insert_actuations(c, again.tolist())


def test_upgrade_keeps_one_of_each_duplicate_of_an_old_store(db_url):
    engine = make_engine(db_url)
    try:
        upgrade(engine)
        old = Store(engine, db_url, readonly=False)
        bench, unit = _bench(old)
        w = old.start_run(bench, {0: unit}, profile={})
        w.add(actuations=actuations([0], range(3)))
        w.flush()
        w.close("stopped")
        downgrade_to(engine, "0003")  # a store as revision 0003 holds it
        dup = actuations([0], [2])[1:]  # the break of cycle 2 once more, written later
        dup["bounce_us"] = 12345.0
        with engine.begin() as c:
            bulk_insert_actuations(c, to_stored(dup, np.array([unit]), w.run_id).tolist())
            assert c.execute(text("SELECT count(*) FROM actuations")).scalar() == 7
    finally:
        engine.dispose()
    with Store.open(db_url) as store:
        got = store.actuations(units=[unit])
        assert len(got) == 6
        assert 12345.0 not in got["bounce_us"].tolist()  # the first written is kept
        with store.engine.connect() as c:
            assert c.execute(text("SELECT version_num FROM alembic_version")).scalar() == head_revision()
