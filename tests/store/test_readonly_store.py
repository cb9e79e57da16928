"""A store this user may not write (a read-only folder or file) is read by every reading command.

The commands run in a child process without the power to override file permissions (as root, that
power is dropped with setpriv), so the folder's and file's modes are what decides.
"""

from __future__ import annotations

import csv
import io
import os
import stat
import subprocess
import sys
from pathlib import Path

import pytest

from tests.conftest import need_tool
from tests.report.storefill import fill

ROOT = Path(__file__).resolve().parents[2]


def _reader(*argv: str, cwd: Path) -> subprocess.CompletedProcess:
    cmd = [sys.executable, "-m", "benchlog", *argv]
    if os.geteuid() == 0:
        setpriv = need_tool("setpriv", "util-linux")
        cmd = [setpriv, "--bounding-set", "-dac_override,-dac_read_search,-fowner", *cmd]
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run(cmd, capture_output=True, text=True, env=env, cwd=cwd, timeout=300)


@pytest.fixture
def locked_store(tmp_path):
    """A store closed cleanly (no -wal left) in a folder and file nobody may write."""
    folder = tmp_path / "archive"
    folder.mkdir()
    db = fill(folder / "lab.sqlite", units_per_lot=4, recorded=60, test_end=20_000, seed=3)
    assert sorted(p.name for p in folder.iterdir()) == ["lab.sqlite", "lab.sqlite.lock"]
    os.chmod(db, 0o444)
    os.chmod(folder, 0o555)
    try:
        yield db
    finally:
        os.chmod(folder, 0o755)
        os.chmod(db, 0o644)


def _untouched(db: str) -> None:
    folder = Path(db).parent
    assert sorted(p.name for p in folder.iterdir()) == ["lab.sqlite", "lab.sqlite.lock"]
    assert stat.S_IMODE(os.stat(db).st_mode) == 0o444


def test_db_status_reads_a_store_in_a_read_only_folder(locked_store, tmp_path):
    r = _reader("db", "status", "--db", locked_store, cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert "pending   none" in r.stdout
    assert "snapshot" in r.stderr and r.stderr.count("\n") == 1
    _untouched(locked_store)


def test_export_reads_a_store_in_a_read_only_folder(locked_store, tmp_path):
    r = _reader("export", "csv", "--db", locked_store, cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    rows = list(csv.DictReader(io.StringIO(r.stdout)))
    assert len(rows) > 100
    assert "snapshot" in r.stderr
    _untouched(locked_store)


def test_dashboard_summary_reads_a_store_in_a_read_only_folder(locked_store, tmp_path):
    r = _reader("dash", "--db", locked_store, cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert "AG-MS5" in r.stdout or "bench-A" in r.stdout
    _untouched(locked_store)


def test_qualify_and_report_read_a_store_in_a_read_only_folder(locked_store, tmp_path):
    lots = ["--incumbent", "AG-MS5", "--candidate", "VS-505", "--resamples", "200"]
    q = _reader("qualify", "--db", locked_store, *lots, cwd=tmp_path)
    assert q.returncode in (0, 1, 2), q.stderr  # a verdict, not an error
    assert "verdict:" in q.stdout and "snapshot" in q.stderr
    out = tmp_path / "r.html"
    r = _reader("report", "--db", locked_store, *lots, "--output", str(out), cwd=tmp_path)
    assert r.returncode in (0, 1, 2), r.stderr
    assert out.stat().st_size > 1000
    _untouched(locked_store)


def test_a_file_this_user_may_not_write_is_read_and_said_so(tmp_path):
    db = fill(tmp_path / "lab.sqlite", units_per_lot=3, recorded=30, test_end=5_000, seed=4)
    os.chmod(db, 0o444)
    try:
        r = _reader("db", "status", "--db", db, cwd=tmp_path)
    finally:
        os.chmod(db, 0o644)
    assert r.returncode == 0, r.stderr
    assert "read-only" in r.stderr and "pending   none" in r.stdout
