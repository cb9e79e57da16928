import os
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


def test_installed_wheel_finds_its_migrations_in_benchlog_db(tmp_path):
    # pyproject force-includes db/ as benchlog/_db: the installed package must migrate from there
    pytest.importorskip("hatchling")
    built = subprocess.run(
        [
            sys.executable,
            "-m",
            "pip",
            "wheel",
            "--no-deps",
            "--no-build-isolation",
            "-q",
            "-w",
            str(tmp_path / "dist"),
            str(ROOT),
        ],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert built.returncode == 0, built.stderr
    (wheel,) = (tmp_path / "dist").glob("benchlog-*.whl")
    site = tmp_path / "site"
    with zipfile.ZipFile(wheel) as z:
        names = z.namelist()
        assert "benchlog/_db/env.py" in names and "benchlog/_db/versions/0001_create_the_schema.py" in names
        z.extractall(site)
    code = (
        "import benchlog, benchlog.store as s; print(benchlog.__file__); print(s.migrations_dir()); "
        f"st = s.Store.open({str(tmp_path / 'w.sqlite')!r}); print(s.head_revision()); st.close()"
    )
    env = {**os.environ, "PYTHONPATH": str(site)}
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, env=env, cwd=tmp_path, timeout=60
    )
    assert out.returncode == 0, out.stderr
    pkg, migrations, head = out.stdout.split()
    assert pkg.startswith(str(site)) and migrations == str(site / "benchlog" / "_db") and head == "0007"
