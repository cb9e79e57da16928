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
        assert status(engine).pending == ("0002", "0003", "0004", "0005", "0006")
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
