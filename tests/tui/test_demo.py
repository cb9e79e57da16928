"""`benchlog demo` without a terminal: it records through the real path (simulated sampler on a pty,
pyserial, decoder, analysis, store) and prints the summary instead of opening the dashboard."""

from __future__ import annotations

import subprocess
import sys

from benchlog.store import Store
from benchlog.views.tui._data import cycles_text
from tests.conftest import HANG_S


def _demo(*args: str, cwd=None) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "benchlog", "demo", *args],
        capture_output=True,
        text=True,
        timeout=HANG_S,
        cwd=cwd,
    )


def test_demo_without_a_terminal_prints_the_summary(tmp_path):
    db = tmp_path / "demo.sqlite"
    out = _demo("--db", str(db), "--cycles", "300")  # stdout is a pipe: no dashboard
    assert out.returncode == 0, out.stderr
    assert "Traceback" not in out.stderr
    text = out.stdout
    with Store.open(str(db), readonly=True) as store:
        runs = {r.bench: r for r in store.runs()}
        assert set(runs) == {"BW-BENCH-A", "BW-BENCH-B"}
        a, b = runs["BW-BENCH-A"], runs["BW-BENCH-B"]
        assert a.end_reason == "target" and a.cycles_done >= 300 and a.units == 16
        assert b.end_reason in ("stopped", "all_failed") and b.units == 8  # open-ended: stopped by the demo
        assert store.incidents(b.id, kind="disconnect")  # the pulled cable is a recorded outage
        for run in (a, b):
            head = f"run {run.id} on {run.bench}: ENDED"
            assert head in text
            assert f"units {run.units} ({run.units_failed} failed)" in text
            for ru in store.run_units(run.id):
                line = next(ln for ln in text.splitlines() if f" {ru.unit.serial} " in ln)
                assert cycles_text(ru.unit.cycles) in line
                if ru.unit.status == "failed":
                    assert f"FAILED {cycles_text(ru.unit.failed_at_cycle)}" in line
        parts = {p.part_number for p in store.parts()}
        assert parts == {"AG-MS5", "VS-505", "AG-R12"}
    assert "link down 1x" in text
    assert "benchlog dash --db" in text


def test_demo_refuses_an_existing_file_in_one_line(tmp_path):
    db = tmp_path / "taken.sqlite"
    db.write_bytes(b"keep me")
    out = _demo("--db", str(db), "--no-dash")
    assert out.returncode == 9  # ConfigError
    assert "exists" in out.stderr and "Traceback" not in out.stderr
    assert db.read_bytes() == b"keep me"


def test_demo_rejects_impossible_cycles(tmp_path):
    out = _demo("--db", str(tmp_path / "x.sqlite"), "--cycles", "5")
    assert out.returncode == 64 and "between 200 and 200000" in out.stderr


def test_dash_without_a_terminal_prints_a_summary(built):
    path, ids = built
    out = subprocess.run(
        [sys.executable, "-m", "benchlog", "dash", "--db", path],
        capture_output=True,
        text=True,
        timeout=HANG_S,
    )
    assert out.returncode == 0, out.stderr
    assert f"run {ids['run1']} on bench-1: ENDED" in out.stdout
    out = subprocess.run(
        [sys.executable, "-m", "benchlog", "dash", "--db", path + ".missing"],
        capture_output=True,
        text=True,
        timeout=HANG_S,
    )
    assert out.returncode == 6 and "no database at" in out.stderr and "Traceback" not in out.stderr
