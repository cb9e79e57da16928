"""`benchlog demo` without a terminal: it records through the real path (simulated sampler on a pty,
pyserial, decoder, analysis, store) and prints the summary instead of opening the dashboard."""

from __future__ import annotations

import hashlib
import subprocess
import sys

import numpy as np

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
        assert b.end_reason in ("target", "all_failed") and b.units == 8
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


def stored_results(path) -> dict:
    """What a morning's reader takes from a store: runs, units, their lives, every actuation, incidents
    by kind (not wall-clock times, which differ from one recording to the next). Durations are kept to
    within 1 us: the sampler's clock error is estimated against the host's clock, which moves the last
    microsecond of a few durations from one recording to the next."""
    out = {}
    with Store.open(str(path), readonly=True) as store:
        for run in store.runs():
            units = {}
            for ru in store.run_units(run.id):
                u = ru.unit
                acts = store.actuations(units=[u.id], runs=[run.id])
                cols = ("channel", "cycle", "kind", "flags", "bounce_count", "chatter")
                exact = b"".join(np.ascontiguousarray(acts[c]).tobytes() for c in cols)
                times = np.column_stack([acts[c] for c in ("bounce_us", "transit_us", "longest_gap_us")])
                life = (ru.channel, u.status, u.cycles, u.failed_at_cycle, u.failure_mode, len(acts))
                units[u.serial] = (life, hashlib.sha256(exact).hexdigest(), times)
            # frames a simulated sampler sends before the host has opened its port are lost as they
            # would be on a board (its buffer keeps the last moments only), and how many depends on
            # when the host opened it: a sequence gap before the first actuation is no part of the result
            first = store.actuations(runs=[run.id])["t_start_ns"]
            t0 = int(first.min()) if len(first) else 0
            kinds = sorted(
                i.kind for i in store.incidents(run.id) if not (i.kind == "sequence_gap" and i.t_end_ns < t0)
            )
            out[run.bench] = (run.cycles_done, run.end_reason, run.units, run.units_failed, kinds, units)
    return out


def same_results(a: dict, b: dict, lives_only: tuple[str, ...] = ()) -> None:
    """Equal stores; on the benches in `lives_only` the units' lives and counts only (see below)."""
    assert a.keys() == b.keys()
    for bench in a:
        assert a[bench][:5] == b[bench][:5], bench
        assert a[bench][5].keys() == b[bench][5].keys()
        for serial, (life, exact, times) in a[bench][5].items():
            life2, exact2, times2 = b[bench][5][serial]
            assert life == life2, serial
            if bench not in lives_only:
                assert exact == exact2, serial
                assert np.allclose(times, times2, rtol=0, atol=1.0, equal_nan=True), serial


def test_the_same_seed_records_the_same_demo(tmp_path):
    first, second = tmp_path / "first.sqlite", tmp_path / "second.sqlite"
    for db in (first, second):
        out = _demo("--db", str(db), "--cycles", "300", "--seed", "3")
        assert out.returncode == 0, out.stderr
    a, b = stored_results(first), stored_results(second)
    assert set(a) == {"BW-BENCH-A", "BW-BENCH-B"}
    assert "disconnect" in a["BW-BENCH-B"][4]  # the pulled cable is there both times
    # Bench B's pulled cable loses nothing (the simulated sampler holds its output), but the host cannot
    # tell: the actuations it places inside the outage are marked incomplete, and where the outage
    # falls in sampler time comes from the host's clock. Its units' lives must still agree.
    same_results(a, b, lives_only=("BW-BENCH-B",))


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
