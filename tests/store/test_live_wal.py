"""Opening a store in one process never takes away another process's live write-ahead log.

On POSIX, closing any descriptor of a file drops every lock the process holds on that file, SQLite's
own included (SQLite's "How To Corrupt An SQLite Database File", section 2.2, "Posix advisory locks
canceled by a separate thread doing close()"). A store that opened its database file itself, beside
SQLite, left a recorder without its locks, and the next process to close a connection deleted the
recorder's -wal and -shm files.
"""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]

# The "recorder": opens the store for writing the way `benchlog record` does, commits a row that stays
# in the write-ahead log (no checkpoint), then waits; on a line from stdin it reports whether its -wal
# is still the live file and whether the data is intact.
_HOLDER = textwrap.dedent(
    """
    import os, sys
    from sqlalchemy import text
    from benchlog.store import Store

    path = sys.argv[1]
    store = Store.open(path)
    store.register_part("P-HELD", "held supplier")
    bench = store.register_bench("held bench")
    conn = store.engine.connect()
    conn.execute(text("select count(*) from parts")).scalar()
    print("ready", flush=True)
    sys.stdin.readline()
    fds = []
    for fd in os.listdir("/proc/self/fd"):
        try:
            fds.append(os.readlink(f"/proc/self/fd/{fd}"))
        except OSError:  # the descriptor listdir itself used
            pass
    wal = [t for t in fds if t.startswith(path + "-wal")]
    print("wal", "|".join(wal) or "none", flush=True)
    print("exists", os.path.exists(path + "-wal"), flush=True)
    conn.close()
    with store.engine.connect() as c:
        print("integrity", c.execute(text("pragma integrity_check")).scalar(), flush=True)
        print("parts", c.execute(text("select count(*) from parts")).scalar(), flush=True)
    store.close()
    """
)


def _env() -> dict:
    return {**os.environ, "PYTHONPATH": str(ROOT)}


def test_another_process_opening_the_store_leaves_the_live_wal_alone(tmp_path):
    db = str(tmp_path / "lab.sqlite")
    holder = subprocess.Popen(
        [sys.executable, "-c", _HOLDER, db],
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=_env(),
    )
    try:
        assert holder.stdout.readline().strip() == "ready", holder.stderr.read()
        assert os.path.exists(db + "-wal")
        for _ in range(2):  # status opens and closes its own connection; so does a second recorder's open
            status = subprocess.run(
                [sys.executable, "-m", "benchlog", "db", "status", "--db", db],
                capture_output=True,
                text=True,
                env=_env(),
                timeout=120,
            )
            assert status.returncode == 0, status.stderr
        holder.stdin.write("go\n")
        holder.stdin.flush()
        out, err = holder.communicate(timeout=120)
    finally:
        if holder.poll() is None:
            holder.kill()
        holder.communicate()
    assert holder.returncode == 0, err
    report = dict(line.split(" ", 1) for line in out.splitlines())
    assert report["wal"] == db + "-wal", (report, err)  # not "(deleted)"
    assert report["exists"] == "True"
    assert report["integrity"] == "ok"
    assert report["parts"] == "1"
