import benchlog.store as store_pkg
from benchlog.store._engine import make_engine
from benchlog.store._migrate import current_revision, head_revision, upgrade
from benchlog.views.cli import main


def test_public_surface():
    for name in store_pkg.__all__:
        assert hasattr(store_pkg, name), name


def test_db_status_and_upgrade(tmp_path, capsys):
    db = str(tmp_path / "old.sqlite")
    assert main(["db", "status", "--db", db]) == 6  # no file: a one-line store error
    assert "no database" in capsys.readouterr().err
    engine = make_engine(f"sqlite:///{db}")
    upgrade(engine, "0001")
    engine.dispose()
    assert main(["db", "status", "--db", db]) == 1  # not current
    out = capsys.readouterr().out
    assert "revision  0001" in out and "pending   0002" in out
    assert main(["db", "upgrade", "--db", db]) == 0
    head = head_revision()
    steps = ", ".join(f"{n:04d}" for n in range(2, int(head) + 1))
    assert f"upgraded from 0001 to {head} ({steps})" in capsys.readouterr().out
    assert main(["db", "status", "--db", db]) == 0
    assert main(["db", "upgrade", "--db", db]) == 0
    assert f"already at revision {head_revision()}" in capsys.readouterr().out
    engine = make_engine(f"sqlite:///{db}")
    assert current_revision(engine) == head_revision()
    engine.dispose()


def test_db_upgrade_on_postgresql(pg_url, capsys):
    assert main(["db", "upgrade", "--db", pg_url]) == 0
    assert main(["db", "status", "--db", pg_url]) == 0
    assert "pending   none" in capsys.readouterr().out
