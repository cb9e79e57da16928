"""A lab sharing one store under load; prints each figure beside its target, MISSED where missed.

Run: python tests/benchmarks/bench_lab_load.py [--backend sqlite|postgresql|both] [--benches 8]
     [--sampler-s 600] [--speed 4] [--kill-every-s 120] [--check-every-s 5] [--pg URL]

Several simulated benches (8 channels each, 50 ms on / 50 ms off: 10 cycles/s per channel in sampler
time, faster than real time by --speed) record into one SQLite file, or one PostgreSQL database,
through `benchlog record`, each for --sampler-s seconds of sampler time (a run target of that many
cycles). Meanwhile a dashboard process reads the store's summary every second, `benchlog db status`
and `benchlog db check` run every --check-every-s wall seconds, and the first bench's recorder is
killed with SIGKILL every --kill-every-s seconds of sampler time and resumed at once.

Figures:
- actuations stored per bench against the simulator's own count: each unit is driven through exactly
  the run's target of cycles, one make and one break per cycle; on the killed bench a killed segment's
  unsaved cycles are cycled again after the resume (the simulated sampler restarts with the recorder),
  and a kill between a make and its break loses that break: at most one actuation per channel a kill;
- the largest heartbeat age seen on a live run (the recorder commits every 0.5 s), target <= 1 s: the
  time the runs were read (once the reading store is open, just before its query) less the newest
  heartbeat committed;
- the seconds lost at each kill: from the last commit (the run's heartbeat) to the SIGKILL, i.e. what
  the recorder had received and not yet written, target <= 1 s;
- `db check` results during and after the load (integrity, invariants), target all sound;
- duplicate (unit, cycle, kind) rows, target 0; `db status` failures, target 0.
"""

from __future__ import annotations

import argparse
import os
import signal
import subprocess
import sys
import tempfile
import time
import uuid
from datetime import UTC, datetime
from importlib import resources
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

CHANNELS = 8
CYCLES_PER_S = 10  # 50 ms on, 50 ms off

_DASH = """
import signal, sys, time
from benchlog.store import Store
from benchlog.views.tui._summary import summary_text
url, until = sys.argv[1], float(sys.argv[2])
def _stop(*_):  # told to stop (SIGTERM): leave the loop and say what was done
    global until
    until = 0.0
signal.signal(signal.SIGTERM, _stop)
worst = 0.0
n = 0
seen = False
while time.time() < until:
    t0 = time.perf_counter()
    try:
        with Store.open(url, readonly=True) as store:
            summary_text(store)
        n += 1
        seen = True
    except Exception as exc:
        # the first recorder has not been heard yet: no file, or no schema on the server
        if not seen and ("no database at" in str(exc) or "no benchlog schema" in str(exc)):
            time.sleep(0.2)
            continue
        print("dash-error", type(exc).__name__, " ".join(str(exc).split())[:200], flush=True)
    worst = max(worst, time.perf_counter() - t0)
    time.sleep(min(1.0, max(0.0, until - time.time())))
print("dash", n, worst, flush=True)
"""


def line(name: str, value: str, target: str, ok: bool) -> None:
    print(f"{name:<58} {value:>16}   target {target:<12} {'ok' if ok else 'MISSED'}", flush=True)


def lab_preset(folder: Path) -> Path:
    """The shipped relay preset (8 channels) with lives far beyond the test, so every unit cycles to
    the end and the count of actuations is exact."""
    text = resources.files("benchlog.presets").joinpath("relay-night.toml").read_text("utf-8")
    lines, skip = [], False
    for ln in text.splitlines():
        if ln.startswith("["):
            skip = ln.strip() == "[autostart]"
        if skip:
            continue
        if ln.startswith("life_scale"):
            ln = "life_scale = 1.0e12"
        if ln.startswith("wear_per_100k"):
            ln = "wear_per_100k = 0.0"
        lines.append(ln)
    path = folder / "lab-relays.toml"
    path.write_text("\n".join(lines) + "\n")
    return path


def _env() -> dict:
    return {**os.environ, "PYTHONPATH": str(ROOT)}


def _benchlog(*argv: str, **kw) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "benchlog", *argv],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=_env(),
        **kw,
    )


class Lab:
    """Owns every process it starts: `close()` kills and reaps them all."""

    def __init__(self, db: str, preset: Path, benches: int, cycles: int, speed: float) -> None:
        self.db, self.preset, self.benches, self.cycles, self.speed = db, preset, benches, cycles, speed
        self.procs: list[subprocess.Popen] = []
        self.recorders: dict[int, subprocess.Popen] = {}

    def start(self, proc: subprocess.Popen) -> subprocess.Popen:
        self.procs.append(proc)
        return proc

    def record(self, i: int) -> subprocess.Popen:
        units = [f"{ch}=AG-R12/lab-{i}/R{i}-{ch:02d}" for ch in range(CHANNELS)]
        p = _benchlog(
            "record",
            "--sim",
            str(self.preset),
            "--sim-speed",
            str(self.speed),
            "--sim-seed",
            str(i),
            "--bench",
            f"lab bench {i}",
            "--profile",
            f"50:50:{self.cycles}",
            "--units",
            *units,
            "--window",
            "100",
            "--quiet",
            "--db",
            self.db,
        )
        self.recorders[i] = self.start(p)
        return p

    def resume(self, i: int, run_id: int) -> subprocess.Popen:
        p = _benchlog(
            "record",
            "--sim",
            str(self.preset),
            "--sim-speed",
            str(self.speed),
            "--sim-seed",
            str(100 + i),
            "--resume",
            str(run_id),
            "--quiet",
            "--db",
            self.db,
        )
        self.recorders[i] = self.start(p)
        return p

    def close(self) -> None:
        for p in self.procs:
            if p.poll() is None:
                p.kill()
        for p in self.procs:
            try:
                p.communicate(timeout=60)
            except (subprocess.TimeoutExpired, ValueError):
                p.kill()
                p.wait()


def _runs(db: str, read_at: list | None = None) -> dict[str, dict]:
    """bench name -> {run id, heartbeat, ended, cycles} of its newest run (empty before any).

    `read_at`, when given, gets the wall-clock time the runs were read: taken once the store is open,
    just before the query, whose snapshot is the store as of then. (Opening a store on a loaded machine
    can take a second; that is the reader's delay, not the recorders'.)"""
    from benchlog.store import Store

    try:
        with Store.open(db, readonly=True) as store:
            out = {}
            if read_at is not None:
                read_at.append(datetime.now(UTC))
            for r in store.runs():
                if r.bench not in out:
                    out[r.bench] = {
                        "id": r.id,
                        "heartbeat": r.heartbeat_at,
                        "ended": r.ended_at is not None,
                        "cycles": r.cycles_done,
                        "state": r.state,
                        "reason": r.end_reason,
                    }
            return out
    except Exception:  # not created yet, or busy: the next poll sees it
        return {}


def _run_cli(*argv: str) -> tuple[int, str, float]:
    t0 = time.perf_counter()
    r = subprocess.run(
        [sys.executable, "-m", "benchlog", *argv], capture_output=True, text=True, env=_env(), timeout=600
    )
    return r.returncode, r.stdout + r.stderr, time.perf_counter() - t0


def run_lab(
    db: str,
    *,
    benches: int = 8,
    sampler_s: float = 600.0,
    speed: float = 4.0,
    kill_every_s: float = 120.0,
    check_every_s: float = 5.0,
    workdir: Path,
) -> dict:
    """Run the lab; returns the figures (see the module docstring)."""
    from benchlog.store import Store

    cycles = int(sampler_s * CYCLES_PER_S)
    lab = Lab(db, lab_preset(workdir), benches, cycles, speed)
    fig: dict = {"kills": [], "hb_max": 0.0, "checks": 0, "check_failed": [], "status_failed": []}
    try:
        for i in range(benches):
            lab.record(i)
            time.sleep(0.3)  # stagger the starts a little, as a lab would
        wall = sampler_s / speed
        dash = lab.start(
            subprocess.Popen(
                [sys.executable, "-c", _DASH, db, str(time.time() + wall + 120)],
                stdout=subprocess.PIPE,
                stderr=subprocess.PIPE,
                text=True,
                env=_env(),
            )
        )
        t_start = time.monotonic()
        next_kill = t_start + kill_every_s / speed
        next_check = t_start + check_every_s
        down_until = 0.0
        resumed_at = None  # a segment is killed only once it has committed (its heartbeat is newer)
        while True:
            now = time.monotonic()
            read_at: list = []
            runs = _runs(db, read_at)
            stamp = read_at[-1] if read_at else datetime.now(UTC)
            for name, r in runs.items():
                killed_bench = name == "lab bench 0" and now < down_until
                if not r["ended"] and r["heartbeat"] is not None and not killed_bench:
                    fig["hb_max"] = max(fig["hb_max"], (stamp - r["heartbeat"]).total_seconds())
            # a run ends at its target, or earlier (reported: its actuations fall short of the count)
            ended = [
                n
                for n, r in runs.items()
                if r["ended"] and (r["cycles"] >= cycles or r["reason"] != "stopped")
            ]
            if len(ended) == benches:
                fig["ends"] = {n: (r["reason"], r["cycles"]) for n, r in sorted(runs.items())}
                break
            for i, p in lab.recorders.items():
                if p.poll() is not None and p.returncode != 0 and f"lab bench {i}" not in ended:
                    raise RuntimeError(f"recorder {i} ended with {p.returncode}: {p.stderr.read()[-2000:]}")
            zero = runs.get("lab bench 0")
            if (
                now >= next_kill
                and zero is not None
                and (resumed_at is None or zero["heartbeat"] > resumed_at)
                and not zero["ended"]
                and lab.recorders[0].poll() is None
            ):
                victim = lab.recorders[0]
                victim.send_signal(signal.SIGKILL)
                killed_at = datetime.now(UTC)
                victim.communicate(timeout=60)
                after = _runs(db)["lab bench 0"]
                fig["kills"].append((killed_at - after["heartbeat"]).total_seconds())
                down_until = time.monotonic() + 15.0  # the resumed recorder's first heartbeat
                lab.resume(0, after["id"])
                resumed_at = datetime.now(UTC)
                next_kill = time.monotonic() + kill_every_s / speed
            if now >= next_check and runs:
                code, out, _ = _run_cli("db", "status", "--db", db)
                if code != 0:
                    fig["status_failed"].append(out.strip()[-300:])
                code, out, _ = _run_cli("db", "check", "--db", db)
                fig["checks"] += 1
                if code != 0:
                    fig["check_failed"].append(out.strip()[-600:])
                next_check = time.monotonic() + check_every_s
            if now - t_start > 20 * wall + 600:
                raise RuntimeError("the lab did not finish in twenty times its planned wall time")
            time.sleep(0.2)
        fig["wall_s"] = time.monotonic() - t_start
        dash.send_signal(signal.SIGTERM)
        out, _ = dash.communicate(timeout=60)
        fig["dash"] = out.strip().splitlines()
        code, out, _ = _run_cli("db", "check", "--db", db)
        fig["final_check"] = (code, out)
        from sqlalchemy import text

        with Store.open(db, readonly=True) as store:
            with store.engine.connect() as c:
                fig["duplicates"] = c.execute(
                    text(
                        "SELECT count(*) FROM (SELECT 1 FROM actuations GROUP BY unit_id, cycle, kind "
                        "HAVING count(*) > 1) AS d"
                    )
                ).scalar()
                stored = dict(
                    c.execute(
                        text(
                            "SELECT b.name, count(*) FROM actuations a JOIN runs r ON r.id = a.run_id "
                            "JOIN benches b ON b.id = r.bench_id GROUP BY b.name"
                        )
                    ).all()
                )
                # the killed bench per unit, to read a count that is off: (makes, breaks, highest cycle)
                fig["killed_units"] = [
                    tuple(r)
                    for r in c.execute(
                        text(
                            "SELECT u.serial, sum(CASE WHEN a.kind = 0 THEN 1 ELSE 0 END), "
                            "sum(CASE WHEN a.kind = 1 THEN 1 ELSE 0 END), max(a.cycle) FROM actuations a "
                            "JOIN units u ON u.id = a.unit_id JOIN runs r ON r.id = a.run_id "
                            "JOIN benches b ON b.id = r.bench_id WHERE b.name = 'lab bench 0' "
                            "GROUP BY u.serial ORDER BY u.serial"
                        )
                    ).all()
                ]
        fig["stored"] = {name: int(n) for name, n in sorted(stored.items())}
        fig["expected_per_bench"] = 2 * CHANNELS * cycles
        return fig
    finally:
        lab.close()


def report(label: str, fig: dict, speed: float) -> bool:
    ok_all = True

    def put(name, value, target, ok):
        nonlocal ok_all
        ok_all &= ok
        line(f"{label}: {name}", value, target, ok)

    exp = fig["expected_per_bench"]
    others = {n: v for n, v in fig["stored"].items() if n != "lab bench 0"}
    total = sum(others.values())
    want = exp * len(others)
    put("stored / simulator's count (benches not killed)", f"{total:,}/{want:,}", "all", total == want)
    # a kill between a make and its break loses that break: the resumed sampler starts a new cycle
    short = exp - fig["stored"].get("lab bench 0", 0)
    allowed = len(fig["kills"]) * CHANNELS
    put("killed bench: actuations short of the count", f"{short:,}", f"<= {allowed}", 0 <= short <= allowed)
    put("largest heartbeat age", f"{fig['hb_max']:.2f} s", "<= 1 s", fig["hb_max"] <= 1.0)
    for k, lost in enumerate(fig["kills"]):
        put(f"kill {k + 1}: seconds lost (last commit to SIGKILL)", f"{lost:.2f} s", "<= 1 s", lost <= 1.0)
    put("kills and resumes", str(len(fig["kills"])), ">= 1", len(fig["kills"]) >= 1)
    n_bad = len(fig["check_failed"])
    put("db check during the load: not sound", f"{n_bad}/{fig['checks']}", "0", n_bad == 0)
    put("db status failures", str(len(fig["status_failed"])), "0", not fig["status_failed"])
    code, out = fig["final_check"]
    put("db check after the load", "sound" if code == 0 else "DAMAGED", "sound", code == 0)
    put("duplicate (unit, cycle, kind) rows", str(fig["duplicates"]), "0", fig["duplicates"] == 0)
    errors = [ln for ln in fig["dash"] if ln.startswith("dash-error")]
    put("dashboard read errors", str(len(errors)), "0", not errors)
    summary = next((ln for ln in fig["dash"] if ln.startswith("dash ")), "dash 0 0")
    _, n, worst_read = summary.split()
    # it reads, then sleeps a second (a read of the whole lab's summary takes 1-2 s on this loaded
    # 2-core machine): a dashboard that stalls or dies refreshes far less often
    want = int(fig["wall_s"] / 5)
    put("dashboard refreshes", n, f">= {want}", int(n) >= want)
    print(
        f"{label}: {fig['wall_s']:.0f} s wall at x{speed:g};"
        f" slowest dashboard read {float(worst_read):.2f} s",
        flush=True,
    )
    early = {n: e for n, e in fig["ends"].items() if e[0] != "target"}
    put(
        "runs ended before their target",
        ", ".join(f"{n}: {r} at {c}" for n, (r, c) in early.items()) or "0",
        "0",
        not early,
    )
    for text in fig["check_failed"][:3] + fig["status_failed"][:3] + errors[:3]:
        print(f"{label}:   {text}", flush=True)
    return ok_all


def _pg_database(base: str):
    """A fresh schema on the server for this run (dropped afterwards); returns (url, drop)."""
    from sqlalchemy import create_engine, text

    schema = "lab_" + uuid.uuid4().hex[:10]
    admin = create_engine(base)
    with admin.begin() as c:
        c.execute(text(f'CREATE SCHEMA "{schema}"'))
    sep = "&" if "?" in base else "?"

    def drop() -> None:
        with admin.begin() as c:
            c.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
        admin.dispose()

    return f"{base}{sep}options=-csearch_path%3D{schema}", drop


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--backend", choices=("sqlite", "postgresql", "both"), default="both")
    ap.add_argument("--benches", type=int, default=8)
    ap.add_argument("--sampler-s", type=float, default=600.0, help="sampler seconds per bench (default 600)")
    ap.add_argument("--speed", type=float, default=4.0, help="sampler time runs N times the wall clock")
    ap.add_argument("--kill-every-s", type=float, default=120.0, help="sampler seconds between kills")
    ap.add_argument("--check-every-s", type=float, default=5.0, help="wall seconds between db status/check")
    ap.add_argument("--pg", default=os.environ.get("BENCHLOG_TEST_PG_URL"), help="PostgreSQL URL")
    a = ap.parse_args()
    print(
        f"lab load: {a.benches} benches x {CHANNELS} channels x {CYCLES_PER_S} cycles/s, "
        f"{a.sampler_s:g} s of sampler time at x{a.speed:g}, a kill every {a.kill_every_s:g} sampler s",
        flush=True,
    )
    ok = True
    backends = ["sqlite", "postgresql"] if a.backend == "both" else [a.backend]
    for backend in backends:
        with tempfile.TemporaryDirectory() as tmp:
            drop = None
            if backend == "sqlite":
                db = str(Path(tmp) / "lab.sqlite")
            else:
                if not a.pg:
                    print("postgresql: skipped (no --pg URL and no BENCHLOG_TEST_PG_URL)")
                    continue
                db, drop = _pg_database(a.pg)
            try:
                kw = dict(benches=a.benches, sampler_s=a.sampler_s, speed=a.speed)
                fig = run_lab(
                    db, **kw, kill_every_s=a.kill_every_s, check_every_s=a.check_every_s, workdir=Path(tmp)
                )
                ok &= report(backend, fig, a.speed)
            finally:
                if drop is not None:
                    drop()
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
