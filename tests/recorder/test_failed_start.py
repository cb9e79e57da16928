"""A `record` that fails before the sampler is heard changes nothing in the store."""

from __future__ import annotations

import pytest
from sqlalchemy import text

from benchlog.store import Store
from benchlog.views.cli import main

NO_PORT = "/dev/benchlog-no-such-port"


def _stopped_run(db: str) -> int:
    with Store.open(db) as store:
        part = store.register_part("AG-R12", "Ashgrove Components")
        unit = store.register_unit(store.register_lot(part, "L1"), "R-001")
        w = store.start_run(store.register_bench("bench R"), {0: unit}, profile={"on_ms": 50, "off_ms": 50})
        w.close("stopped")
        return w.run_id


def _counts(db: str) -> dict:
    with Store.open(db, readonly=True) as store, store.engine.connect() as c:
        return {
            t: c.execute(text(f"SELECT count(*) FROM {t}")).scalar()
            for t in ("benches", "parts", "lots", "units", "runs", "run_units")
        }


def test_resume_on_a_mistyped_port_keeps_the_runs_end_and_takes_no_lease(db_url, capsys):
    run_id = _stopped_run(db_url)
    code = main(["record", NO_PORT, "--resume", str(run_id), "--db", db_url])
    err = capsys.readouterr().err
    assert code == 4 and err.count("\n") == 1  # PortError
    with Store.open(db_url, readonly=True) as store:
        run = store.run(run_id)
        assert run.end_reason == "stopped" and run.ended_at is not None and run.segments == 1
        (bench,) = store.benches()
        assert not bench.recording
        with store.engine.connect() as c:
            assert c.execute(text("SELECT lease_token FROM benches")).scalar() is None


def test_record_on_a_mistyped_port_creates_no_database(tmp_path, capsys):
    db = tmp_path / "new.sqlite"
    argv = ["record", NO_PORT, "--bench", "bench N", "--profile", "50:50:10", "--units", "0=N01"]
    code = main([*argv, "--part", "AG-R12", "--db", str(db)])
    assert code == 4 and capsys.readouterr().err.count("\n") == 1
    assert list(tmp_path.iterdir()) == []


def test_record_on_a_mistyped_port_registers_nothing_in_a_store(db_url, capsys):
    _stopped_run(db_url)
    before = _counts(db_url)
    argv = ["record", NO_PORT, "--bench", "bench N", "--profile", "50:50:10", "--units", "0=N01", "1=N02"]
    assert main([*argv, "--part", "VS-505", "--db", db_url]) == 4
    capsys.readouterr()
    assert _counts(db_url) == before


@pytest.mark.parametrize("bad", ["[limits\n", "[limits.make_bounce]\nmax_ms = 'x'\n"])
def test_a_spec_that_does_not_parse_stops_before_the_port_and_the_store(tmp_path, capsys, bad):
    spec = tmp_path / "bad.toml"
    spec.write_text(bad)
    db = tmp_path / "new.sqlite"
    argv = ["record", "--sim", "demo", "--bench", "b", "--profile", "50:50:10", "--units", "0=N01"]
    code = main([*argv, "--part", "P", "--spec", str(spec), "--db", str(db)])
    err = capsys.readouterr().err
    assert code == 8 and err.count("\n") == 1  # SpecError
    assert not db.exists()


def test_a_port_where_no_sampler_answers_writes_nothing(tmp_path, children):
    # the port opens (a pseudo-terminal nobody drives: an unpowered or wrong board) but nothing
    # answers; the recorder waits without writing, says so, and a stop ends it in one line
    import os
    import pty
    import signal

    master, slave = pty.openpty()
    try:
        db = tmp_path / "never.sqlite"
        p = children.benchlog(
            "record",
            os.ttyname(slave),
            "--bench",
            "Q",
            "--profile",
            "50:50:10",
            "--units",
            "0=AG-MS5/L1/Q-001",
            "--db",
            str(db),
            sigint="ignored",
        )
        p.wait_line("no reply from a sampler", stream="stderr")
        p.signal(signal.SIGTERM)
        rc, out, err = p.finish()
        assert rc == 4, err  # PortError
        assert err.strip().splitlines()[-1].startswith("benchlog: error: no sampler answered")
        assert "Traceback" not in err and not db.exists()
    finally:
        os.close(master)
        os.close(slave)
