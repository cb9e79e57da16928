import sqlite3
import threading

import pytest
from sqlalchemy import text

from benchlog.errors import StoreError
from benchlog.store import ENV_VAR, Store, resolve_url
from benchlog.store._engine import make_engine


def test_sqlite_pragmas_are_set_on_every_connection(sqlite_url):
    store = Store.open(sqlite_url)
    try:
        for _ in range(2):  # a second pooled connection gets them too
            with store.engine.connect() as c:
                assert c.execute(text("PRAGMA journal_mode")).scalar() == "wal"
                assert c.execute(text("PRAGMA synchronous")).scalar() == 1  # NORMAL (SQLite docs)
                assert c.execute(text("PRAGMA foreign_keys")).scalar() == 1
                assert c.execute(text("PRAGMA busy_timeout")).scalar() == 10_000
    finally:
        store.close()


def test_default_location_env_and_option(tmp_path, monkeypatch):
    monkeypatch.delenv(ENV_VAR, raising=False)
    monkeypatch.chdir(tmp_path)
    assert resolve_url() == f"sqlite:///{tmp_path / 'benchlog.sqlite'}"
    monkeypatch.setenv(ENV_VAR, str(tmp_path / "lab.sqlite"))
    assert resolve_url() == f"sqlite:///{tmp_path / 'lab.sqlite'}"
    assert resolve_url("other.sqlite") == f"sqlite:///{tmp_path / 'other.sqlite'}"
    assert resolve_url("postgresql+psycopg://u@h/db") == "postgresql+psycopg://u@h/db"


def test_bad_locations_are_one_line_errors(tmp_path):
    with pytest.raises(StoreError, match="does not exist"):
        Store.open(str(tmp_path / "missing" / "x.sqlite"))
    with pytest.raises(StoreError, match="unsupported database"):
        make_engine("mysql://u@h/db")
    with pytest.raises(StoreError, match="no database"):
        Store.open(str(tmp_path / "none.sqlite"), readonly=True)


def test_foreign_file_is_refused_not_recreated(tmp_path):
    path = tmp_path / "other.sqlite"
    con = sqlite3.connect(path)
    con.execute("CREATE TABLE mine (x)")
    con.execute("INSERT INTO mine VALUES (42)")
    con.commit()
    con.close()
    with pytest.raises(StoreError, match="other tables"):
        Store.open(str(path))
    assert sqlite3.connect(path).execute("SELECT x FROM mine").fetchall() == [(42,)]


def test_readonly_store_cannot_write(open_store):
    open_store().register_bench("bench A")
    ro = open_store(readonly=True)
    assert [b.name for b in ro.benches()] == ["bench A"]
    with pytest.raises(StoreError):
        ro.register_bench("bench B")


def test_readonly_reader_does_not_block_a_writer_mid_transaction(sqlite_url):
    writer = Store.open(sqlite_url)
    writer.register_bench("bench A")
    reader = Store.open(sqlite_url, readonly=True)
    try:
        with writer.engine.connect() as c:
            c.execute(text("UPDATE benches SET board_id = 'x'"))  # holds the write lock, uncommitted
            names = []
            t = threading.Thread(target=lambda: names.extend(b.name for b in reader.benches()))
            t.start()
            t.join(5)
            assert names == ["bench A"]
            c.commit()
        # and a reader holding a read transaction open does not stop the writer committing
        with reader.engine.connect() as rc:
            rc.execute(text("BEGIN"))
            rc.execute(text("SELECT count(*) FROM benches")).scalar()
            writer.register_bench("bench B")
            rc.execute(text("ROLLBACK"))
        assert sorted(b.name for b in reader.benches()) == ["bench A", "bench B"]
        with reader.engine.connect() as rc:
            assert rc.execute(text("PRAGMA query_only")).scalar() == 1
    finally:
        reader.close()
        writer.close()
