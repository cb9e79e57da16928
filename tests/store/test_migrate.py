from sqlalchemy import inspect, text

import benchlog.store as store_pkg
from benchlog.analysis._types import ACTUATION_DTYPE
from benchlog.errors import StoreError
from benchlog.store import Store, head_revision, migrations_dir
from benchlog.store._engine import make_engine
from benchlog.store._migrate import current_revision, status, upgrade
from benchlog.store._schema import ACTUATION_COLUMNS, metadata


def test_every_actuation_column_is_stored():
    # ACTUATION_DTYPE may grow at its end; each new column needs a column here and a migration.
    assert set(ACTUATION_DTYPE.names) <= {name for name, _ in ACTUATION_COLUMNS}
    assert set(ACTUATION_DTYPE.names) <= set(store_pkg.STORED_ACTUATION_DTYPE.names)


def test_migrations_are_found_in_the_checkout():
    assert (migrations_dir() / "versions").is_dir()
    # the head is the newest script of the linear chain 0001, 0002, ...
    newest = max(p.name.split("_", 1)[0] for p in (migrations_dir() / "versions").glob("0*.py"))
    assert head_revision() == newest


def test_migrations_build_exactly_the_models(db_url):
    # Alembic's autogenerate comparison (alembic.autogenerate.compare_metadata) finds no difference
    from alembic.autogenerate import compare_metadata
    from alembic.migration import MigrationContext

    engine = make_engine(db_url)
    try:
        upgrade(engine)
        with engine.connect() as c:
            diff = compare_metadata(MigrationContext.configure(c), metadata)
        assert diff == []
    finally:
        engine.dispose()


def test_old_database_is_upgraded_with_its_data(db_url):
    engine = make_engine(db_url)
    try:
        upgrade(engine, "0001")
        assert current_revision(engine) == "0001"
        assert status(engine).pending == ("0002", "0003", "0004", "0005", "0006", "0007", "0008")
        with engine.begin() as c:
            c.execute(text("INSERT INTO benches (name, created_at) VALUES ('bench A', '2026-01-01')"))
        assert "note" not in {col["name"] for col in inspect(engine).get_columns("runs")}
    finally:
        engine.dispose()

    # read-only opening refuses an old schema rather than guessing
    try:
        Store.open(db_url, readonly=True).close()
        raise AssertionError("read-only open of an old schema should fail")
    except StoreError as exc:
        assert "db upgrade" in str(exc)

    store = Store.open(db_url)  # upgrades, never recreates
    try:
        assert [b.name for b in store.benches()] == ["bench A"]
        assert current_revision(store.engine) == head_revision()
        bench = store.benches()[0].id
        w = store.start_run(bench, {0: _unit(store)}, profile={}, note="overnight")
        w.close("stopped")
        assert store.run(w.run_id).note == "overnight"
    finally:
        store.close()


def _unit(store):
    part = store.register_part("AG-R12", "Ashgrove Components")
    return store.register_unit(store.register_lot(part, "L1"), "U1")


def test_failures_stored_before_0007_get_the_exact_run_time_and_no_wall_clock(open_store):
    # a store written at 0006: failures with a cycle and a mode only, and one actuation judged FAIL
    from benchlog.analysis._types import FAIL
    from benchlog.views.tui._summary import summary_text
    from tests.store._data import actuations, downgrade_to

    store = open_store()
    part = store.register_part("AG-R12", "Ashgrove Components")
    lot = store.register_lot(part, "L1")
    units = {ch: store.register_unit(lot, f"U{ch}") for ch in range(3)}
    w = store.start_run(store.register_bench("bench A"), units, profile={}, target_cycles=100)
    acts = actuations(range(3), range(20))
    acts["chatter"][(acts["channel"] == 1) & (acts["cycle"] == 7) & (acts["kind"] == 1)] = 2
    acts["verdict"][(acts["channel"] == 1) & (acts["cycle"] >= 5)] = FAIL
    w.add(actuations=acts)
    w.mark_failed(units[0], 10, "welded")
    w.mark_failed(units[1], 7, "chatter")
    w.mark_failed(units[2], 50, "missed_make")  # its failing actuation was never stored
    w.close("all_failed")
    downgrade_to(store.engine, "0006")
    assert "failed_at" not in {c["name"] for c in inspect(store.engine).get_columns("unit_life")}
    assert status(store.engine).pending == ("0007", "0008")

    store.close()
    store = open_store()  # opening for writing upgrades an older schema
    assert current_revision(store.engine) == head_revision()
    got = {u.serial: u for u in store.units()}
    # the break of cycle 10 of _data.actuations: 10 periods of 100 ms, then half a period
    assert got["U0"].failed_at_ns == 10 * 100_000_000 + 50_000_000
    assert got["U1"].failed_at_ns == 7 * 100_000_000 + 50_000_000  # the actuation with chatter
    assert got["U2"].failed_at_ns is None
    assert all(u.failed_at is None for u in got.values())  # the host's time was never stored
    assert (got["U1"].first_break_cycle, got["U1"].first_break_ns) == (5, 5 * 100_000_000)
    assert got["U1"].first_break_run_id == w.run_id and got["U1"].first_break_at is None
    assert got["U0"].first_break_cycle is None
    assert [u.failed_at_cycle for u in got.values()] == [10, 7, 50]  # nothing else changed
    text = summary_text(store)
    assert f"failed at cycle 10: time not recorded (run {w.run_id} at 0:00:01.050)" in text
    assert "failed at cycle 50: time not recorded\n" in text + "\n"
    assert f"first out of spec at cycle 5: time not recorded (run {w.run_id} at 0:00:00.500)" in text


def test_a_store_before_0008_upgrades_with_no_first_drift_flag(open_store):
    # a store written at 0007: a unit flagged by a recorder of today, then the schema taken down
    from datetime import UTC, datetime

    from benchlog.analysis._types import MAKE
    from tests.store._data import actuations, downgrade_to

    store = open_store()
    part = store.register_part("AG-R12", "Ashgrove Components")
    lot = store.register_lot(part, "L1")
    units = {ch: store.register_unit(lot, f"U{ch}") for ch in range(2)}
    w = store.start_run(store.register_bench("bench A"), units, profile={}, target_cycles=100)
    w.add(actuations=actuations(range(2), range(20)))
    w.flush()
    w.mark_drift(units[0], "make_bounce", MAKE, 12, at=datetime(2026, 12, 3, 2, 0, tzinfo=UTC))
    w.close("target")
    flagged = next(u for u in store.units() if u.serial == "U0")
    # the make of cycle 12 of _data.actuations starts at 12 periods of 100 ms
    assert (flagged.first_drift_cycle, flagged.first_drift_ns) == (12, 12 * 100_000_000)
    assert flagged.first_drift_metric == "make_bounce" and flagged.first_drift_run_id == w.run_id
    downgrade_to(store.engine, "0007")
    assert "first_drift_at" not in {c["name"] for c in inspect(store.engine).get_columns("unit_life")}
    assert status(store.engine).pending == ("0008",)

    store.close()
    store = open_store()  # opening for writing upgrades an older schema, keeping its rows
    assert current_revision(store.engine) == head_revision()
    got = {u.serial: u for u in store.units()}
    assert set(got) == {"U0", "U1"} and all(u.cycles == 20 for u in got.values())
    for u in got.values():  # the recorder of 0007 judged no drift: nothing recorded
        assert (u.first_drift_metric, u.first_drift_cycle, u.first_drift_ns, u.first_drift_at) == (None,) * 4
    assert len(store.actuations(units=[got["U0"].id])) == 40
