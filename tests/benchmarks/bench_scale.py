"""A lab's year in one store: qualification, report and population reads over N actuations, timed with
peak memory, each in a process of its own (the path a user runs: `benchlog qualify`, `benchlog report`).

Targets (issue 18), for 10 M actuations: `qualify` <= 10 s and <= 400 MB peak; `report` <= 15 s and
<= 400 MB; for 100 M: `qualify` <= 60 s and the same peak memory as at 10 M (within 25 %).

The store is a real SQLite file written through the store's own writer (`RunWriter.add/flush`: the
actuations, rollups and distribution summaries the recorder writes), two parts (AG-MS5 and VS-505 of
the demo scenario, invented data), 16 units each, make + break per cycle, bounce-like values drawn
with numpy (lognormal bounce, normal operate time, Poisson bounce count, rare chatter). No raw edges
are generated, so `debounce --part` (which replays raw edges) is not measured here. The store is kept
(`--keep PATH`) so a second run measures without rebuilding; building time is printed.

    python tests/benchmarks/bench_scale.py [--actuations 10000000] [--keep PATH] [--repeat 3]
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from importlib import resources
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))


UNITS_PER_LOT = 16
CHUNK_CYCLES = 20_000  # cycles per unit per writer batch


def build(path: Path, n_actuations: int, seed: int = 7) -> float:
    """Write the store; returns seconds taken."""
    import numpy as np

    from benchlog.analysis import BREAK, MAKE, empty_actuations
    from benchlog.store import Store

    t0 = time.perf_counter()
    rng = np.random.default_rng(seed)
    store = Store.open(str(path))
    try:
        units: dict[int, int] = {}
        scale: dict[int, float] = {}
        for p, (part, supplier) in enumerate(
            (("AG-MS5", "Ashgrove Components"), ("VS-505", "Vellmar Switchgear"))
        ):
            spec = resources.files("benchlog.presets").joinpath("specs", f"{part}.toml").read_text("utf-8")
            lot = store.register_lot(store.register_part(part, supplier, spec_toml=spec), "L1")
            for i in range(UNITS_PER_LOT):
                ch = p * UNITS_PER_LOT + i
                units[ch] = store.register_unit(lot, f"{part}-L1-{i + 1:03d}")
                scale[ch] = (1.0 if p == 0 else 1.15) * rng.lognormal(0, 0.1)
        bench = store.register_bench("bench-scale", channels=len(units))
        cycles = n_actuations // (2 * len(units))
        w = store.start_run(bench, units, profile={"on_ms": 50, "off_ms": 50}, target_cycles=cycles)
        for lo in range(0, cycles, CHUNK_CYCLES):
            hi = min(lo + CHUNK_CYCLES, cycles)
            for ch in units:
                n = (hi - lo) * 2
                a = empty_actuations(n)
                a["channel"] = ch
                a["cycle"] = np.repeat(np.arange(lo, hi), 2)
                a["kind"] = np.tile([MAKE, BREAK], hi - lo)
                a["drive_level"] = np.where(a["kind"] == MAKE, 1, 0)
                a["t_start_ns"] = a["cycle"] * 100_000_000 + a["kind"].astype(np.int64) * 50_000_000
                a["t_first_ns"] = a["t_start_ns"] + 6_000_000
                a["t_settle_ns"] = a["t_first_ns"] + 800_000
                a["t_end_ns"] = a["t_start_ns"] + 50_000_000
                wear = 1.0 + a["cycle"] / 2e6
                a["bounce_us"] = rng.lognormal(np.log(700 * scale[ch]), 0.5, n) * wear
                a["bounce_us"][a["kind"] == BREAK] *= 2.5
                a["transit_us"] = rng.normal(7000 * scale[ch], 500, n)
                a["bounce_count"] = rng.poisson(3, n)
                a["longest_gap_us"] = a["bounce_us"] / (a["bounce_count"] + 1)
                a["chatter"] = rng.random(n) < 1e-4
                w.add(actuations=a)
            w.flush()
        w.close("target")
    finally:
        store.close()
    return time.perf_counter() - t0


def timed(cmd: list[str], env: dict) -> tuple[float, float, int, float]:
    """(seconds, peak RSS MB, exit code, CPU seconds) of a child process (os.wait4 gives that child's
    rusage; Linux starts a child's peak at its parent's RSS, so this parent stays small: the store is
    built in a process of its own)."""
    t0 = time.perf_counter()
    p = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        _, status, usage = os.wait4(p.pid, 0)
    finally:
        p.returncode = 0  # reaped by wait4
        if p.stderr:
            p.stderr.close()
    cpu = usage.ru_utime + usage.ru_stime
    return time.perf_counter() - t0, usage.ru_maxrss / 1024, os.waitstatus_to_exitcode(status), cpu


POPULATION = """
import sys, time
from benchlog.store import Store
from benchlog.views.tui._data import Group, read_population
store = Store.open(sys.argv[1], readonly=True)
part = store.parts()[0]
t0 = time.perf_counter()
pop = read_population(store, Group("part", part.id, part.part_number))
assert len(pop.units) == 16, len(pop.units)
store.close()
"""


def line(label: str, value: str, target: str, ok: bool | None) -> None:
    print(f"  {label:<58} {value:>22}   target {target}{'' if ok is None or ok else '   MISSED'}")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--actuations", type=int, default=10_000_000)
    ap.add_argument("--keep", help="store path kept between runs (built when missing)")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--build-only", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.build_only:
        secs = build(Path(args.keep), args.actuations)
        print(f"  built in {secs:,.0f} s ({args.actuations / secs:,.0f} actuations/s through the writer)")
        return 0
    tmp = None
    if args.keep:
        path = Path(args.keep)
    else:
        tmp = tempfile.TemporaryDirectory(prefix="bench-scale-")
        path = Path(tmp.name) / "lab.sqlite"
    n = args.actuations
    print(f"store of {n:,} actuations ({path})")
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    if not path.exists():
        me = [sys.executable, __file__, "--build-only", "--keep", str(path), "--actuations", str(n)]
        subprocess.run(me, env=env, check=True)
    exe = [sys.executable, "-m", "benchlog"]
    lots = ["--incumbent", "AG-MS5", "--candidate", "VS-505", "--db", str(path)]
    big = n >= 50_000_000
    jobs = [
        ("benchlog qualify", [*exe, "qualify", *lots], 60.0 if big else 10.0, 400.0),
        (
            "benchlog report",
            [*exe, "report", *lots, "-o", str(path.with_suffix(".html"))],
            None if big else 15.0,
            400.0,
        ),
        (
            "population screen read (one part, 16 units)",
            [sys.executable, "-c", POPULATION, str(path)],
            None,
            None,
        ),
    ]
    for label, cmd, t_target, m_target in jobs:
        runs = [timed(cmd, env) for _ in range(args.repeat)]
        codes = {r[2] for r in runs}
        secs = statistics.median(r[0] for r in runs)
        peak = max(r[1] for r in runs)
        cpu = statistics.median(r[3] for r in runs)
        failed = not codes <= {0, 1, 2}  # qualify/report: 0 pass, 1 fail, 2 undecided; else an error
        line(
            f"{label}: wall (median of {len(runs)})",
            f"{secs:,.2f} s",
            f"<= {t_target:g} s" if t_target else "for information",
            None if t_target is None else (secs <= t_target and not failed),
        )
        line(f"{label}: CPU time (median)", f"{cpu:,.2f} s", "for information", None)
        line(
            f"{label}: peak RSS",
            f"{peak:,.0f} MB",
            f"<= {m_target:g} MB" if m_target else "for information",
            None if m_target is None else peak <= m_target,
        )
        if failed:
            print(f"  {label}: exit codes {sorted(codes)}   MISSED (the command failed)")
    if tmp is not None:
        tmp.cleanup()
    return 0


if __name__ == "__main__":
    sys.exit(main())
