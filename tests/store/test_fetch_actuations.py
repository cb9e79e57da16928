"""Store.actuations reads through the driver (binary COPY on PostgreSQL): the same array as reading
every row through SQLAlchemy, NaN, sentinels and extreme values included."""

import numpy as np
import pytest
from sqlalchemy import select

from benchlog.analysis._types import INCOMPLETE
from benchlog.store import STORED_ACTUATION_DTYPE
from benchlog.store import _schema as sch
from benchlog.store._write import ACT_FIELDS
from tests.store._data import actuations


def _through_sqlalchemy(store, cond=()) -> np.ndarray:
    """The earlier read path: SQLAlchemy rows, one Python tuple each."""
    a = sch.Actuation.__table__.c
    q = select(*[a[n] for n in ACT_FIELDS]).where(*cond).order_by(a.unit_id, a.cycle, a.kind)
    with store.engine.connect() as c:
        rows = c.execute(q).all()
    return np.array([tuple(r) for r in rows], dtype=STORED_ACTUATION_DTYPE)


def test_fast_read_equals_the_row_by_row_read(store):
    part = store.register_part("VS-505", "Vellmar Switchgear")
    lot = store.register_lot(part, "L-12")
    units = [store.register_unit(lot, f"VS-{i:03d}") for i in range(3)]
    w = store.start_run(store.register_bench("bench F"), dict(enumerate(units)), profile={}, rollup_window=10)
    a = actuations([0, 1, 2], range(60), seed=11)
    rng = np.random.default_rng(4)
    n = len(a)
    for name in ("transit_us", "bounce_us", "longest_gap_us", "wrong_state_us"):
        a[name][rng.random(n) < 0.2] = np.nan
    a["t_first_ns"][::9] = -1  # "never" sentinels
    a["t_settle_ns"][::9] = -1
    a["flags"][::13] = INCOMPLETE | 0x40
    a["flags"][5] = 0xFFFF
    a["verdict"] = rng.integers(0, 4, n)
    a["chatter"] = rng.integers(0, 4, n)
    a["glitches"][7] = 2**31 - 1
    a["bounce_us"][8] = -0.0
    a["transit_us"][9] = 1e300
    a["t_end_ns"][10] = 2**62
    w.add(actuations=a)
    w.close("stopped")

    old = _through_sqlalchemy(store)
    new = store.actuations()
    assert new.dtype == old.dtype == STORED_ACTUATION_DTYPE and len(new) == len(old) == n
    for name in STORED_ACTUATION_DTYPE.names:
        np.testing.assert_array_equal(new[name], old[name], err_msg=name)  # NaN equal to NaN here
    assert np.isnan(new["transit_us"]).sum() == np.isnan(a["transit_us"]).sum() > 0
    assert (new["t_first_ns"] == -1).sum() == (a["t_first_ns"] == -1).sum()

    # filtered reads (IN lists, ranges, a part by number) against the same filters row by row
    c = sch.Actuation.__table__.c
    got = store.actuations(units=[units[0], units[2]], kind="break", cycles=(10, 39))
    ref = _through_sqlalchemy(
        store, (c.unit_id.in_([units[0], units[2]]), c.kind == 1, c.cycle.between(10, 39))
    )
    assert len(got) == len(ref) == 2 * 30
    for name in STORED_ACTUATION_DTYPE.names:
        np.testing.assert_array_equal(got[name], ref[name], err_msg=name)
    assert len(store.actuations(parts=["VS-505"], runs=[w.run_id])) == n
    empty = store.actuations(units=[units[0]], cycles=(1000, 2000))
    assert empty.dtype == STORED_ACTUATION_DTYPE and len(empty) == 0

    # a few columns only (debounce reads 13 of a night's millions of rows): the same values, packed
    some = ("unit_id", "cycle", "bounce_us", "flags", "t_first_ns")
    few = store.actuations(units=[units[0], units[2]], kind="break", cycles=(10, 39), fields=some)
    assert few.dtype.names == some and few.dtype.itemsize == sum(got.dtype[n].itemsize for n in some)
    for name in some:
        np.testing.assert_array_equal(few[name], got[name], err_msg=name)
    assert store.actuations(units=[units[0]], cycles=(1000, 2000), fields=some).dtype.names == some
    with pytest.raises(ValueError, match="no actuation column colour"):
        store.actuations(fields=("cycle", "colour"))


def test_postgresql_reads_the_binary_copy(pg_url):
    # the fixed-layout reader takes the whole answer (it gives None, and the caller fetches rows,
    # only for rows it cannot read as one array)
    from benchlog.store import Store
    from benchlog.store._read import _pg_binary_actuations

    with Store.open(pg_url) as store:
        part = store.register_part("VS-505", "Vellmar Switchgear")
        unit = store.register_unit(store.register_lot(part, "L-12"), "VS-001")
        w = store.start_run(store.register_bench("bench F"), {0: unit}, profile={})
        a = actuations([0], range(25), seed=3)
        a["bounce_us"][::3] = np.nan
        w.add(actuations=a)
        w.close("stopped")
        with store.engine.connect() as c:
            sql = (
                "SELECT "
                + ", ".join(ACT_FIELDS)
                + " FROM actuations WHERE unit_id = %(u)s ORDER BY cycle, kind"
            )
            got = _pg_binary_actuations(c.connection.driver_connection, sql, {"u": unit})
        assert got is not None and len(got) == len(a)
        np.testing.assert_array_equal(got["bounce_us"], a["bounce_us"])
        np.testing.assert_array_equal(got["cycle"], a["cycle"])


def test_nulls_written_by_another_tool_read_as_nan(store):
    # PostgreSQL rows with a NULL no longer have the fixed layout: those reads fetch rows instead
    from sqlalchemy import text

    part = store.register_part("VS-505", "Vellmar Switchgear")
    unit = store.register_unit(store.register_lot(part, "L-12"), "VS-001")
    w = store.start_run(store.register_bench("bench F"), {0: unit}, profile={})
    w.add(actuations=actuations([0], range(20), seed=6))
    w.close("stopped")
    with store.engine.begin() as c:
        c.execute(text("UPDATE actuations SET wrong_state_us = NULL WHERE cycle % 3 = 0"))
    old = _through_sqlalchemy(store)
    new = store.actuations()
    assert np.isnan(new["wrong_state_us"]).sum() == 2 * 7
    for name in STORED_ACTUATION_DTYPE.names:
        np.testing.assert_array_equal(new[name], old[name], err_msg=name)
