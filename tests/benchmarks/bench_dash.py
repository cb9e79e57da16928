"""Dashboard refresh over a store with 10 M actuations: the reads of one refresh beside the target.

Target (issue 5): one refresh of the dashboard's screens over a store holding 10,000,000 actuations
stays under 100 ms, because it reads rollups, never the actuations.

The store is a real SQLite file written through the store's own bulk writer (`RunWriter.add/flush`,
which also makes the rollups), 8 units x 625,000 cycles x (make + break) = 10 M actuations, one run,
window 100 cycles. Building it takes a minute or two and about 2 GB of disk; it is kept between runs
(`--keep PATH` to choose where), so measure again without rebuilding.

    python tests/benchmarks/bench_dash.py [--actuations 10000000] [--keep PATH] [--repeat 20]

Figures printed (median and worst of --repeat reads), the refreshes beside the target:
- runs list refresh (runs + incidents)                                      target < 100 ms
- units of a run, refresh (what a second-by-second refresh reads)          target < 100 ms
- units of a run, refresh when every unit has just completed a window (trend re-reads held to the
  cache's 40 ms budget per refresh; the rest follow on later refreshes)    target < 100 ms
- units of a run, first open: the first batch on screen (trend reads held to 250 ms, the table shows
  what is read) and all batches (every trend read once: 48 trends of 6,250 windows), for information
- one unit's history (trend + drift + histogram over 1,000 cycles of raw actuations), for information
- population of a part, refresh (target < 100 ms) and first open, all batches (for information)
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from benchlog.analysis import BREAK, MAKE, empty_actuations  # noqa: E402
from benchlog.store import Store  # noqa: E402
from benchlog.views.tui._data import (  # noqa: E402
    Group,
    TrendCache,
    read_history,
    read_overview,
    read_population,
    read_run,
)

UNITS = 8
SPEC = """
[part]
number = "BENCH-P"
[limits.make_bounce]
max_ms = 3.0
percentile = 95
[limits.break_bounce]
max_ms = 8.0
percentile = 95
"""


def batch(lo: int, hi: int, rng) -> np.ndarray:
    cyc = np.arange(lo, hi, dtype=np.int64)
    n = UNITS * len(cyc) * 2
    a = empty_actuations(n)
    a["channel"] = np.repeat(np.arange(UNITS, dtype=np.uint8), len(cyc) * 2)
    a["cycle"] = np.tile(np.repeat(cyc, 2), UNITS)
    a["kind"] = np.tile([MAKE, BREAK], UNITS * len(cyc))
    a["drive_level"] = np.where(a["kind"] == MAKE, 1, 0)
    a["t_start_ns"] = a["cycle"] * 100_000_000 + (a["kind"] == BREAK) * 50_000_000
    a["t_first_ns"] = a["t_start_ns"] + 5_000_000
    a["t_settle_ns"] = a["t_first_ns"] + 1_000_000
    a["t_end_ns"] = a["t_start_ns"] + 50_000_000
    a["transit_us"] = rng.uniform(3000, 7000, n)
    a["bounce_us"] = rng.gamma(2.0, 400.0, n) * (1 + a["cycle"] / 1_000_000)
    a["bounce_count"] = rng.integers(0, 6, n)
    a["longest_gap_us"] = a["bounce_us"] / 4
    a["wrong_state_us"] = a["bounce_us"] / 3
    a["chatter"] = (rng.random(n) < 0.001).astype(np.int32)
    a["transfer_us"] = np.nan
    return a


def build(path: Path, actuations: int) -> int:
    cycles = actuations // (UNITS * 2)
    store = Store.open(str(path))
    part = store.register_part("BENCH-P", "bench supplier", spec_toml=SPEC)
    lot = store.register_lot(part, "B1")
    units = {ch: store.register_unit(lot, f"B1-{ch:03d}") for ch in range(UNITS)}
    bench = store.register_bench("bench-big", channels=UNITS)
    w = store.start_run(bench, units, profile={"on_ms": 50, "off_ms": 50}, target_cycles=cycles * 2)
    rng = np.random.default_rng(1)
    step = 12_500  # cycles per flush: 200,000 actuations
    t0 = time.perf_counter()
    for lo in range(0, cycles, step):
        w.add(actuations=batch(lo, min(cycles, lo + step), rng))
        w.flush()
        done = min(cycles, lo + step)
        if (lo // step) % 10 == 0:
            rate = done * UNITS * 2 / (time.perf_counter() - t0)
            print(f"  built {done * UNITS * 2:,} actuations ({rate:,.0f}/s)", file=sys.stderr, flush=True)
    run_id = w.run_id
    w.close("stopped")
    store.close()
    return run_id


def timed(fn, repeat: int) -> tuple[float, float]:
    out = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t0)
    return statistics.median(out) * 1000, max(out) * 1000


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--actuations", type=int, default=10_000_000)
    ap.add_argument("--keep", type=Path, help="the store file (built when missing; kept)")
    ap.add_argument("--repeat", type=int, default=20)
    args = ap.parse_args()
    path = args.keep or Path(tempfile.gettempdir()) / f"benchlog-bench-dash-{args.actuations}.sqlite"
    if not path.exists():
        print(f"building {path} with {args.actuations:,} actuations ...", file=sys.stderr)
        t0 = time.perf_counter()
        build(path, args.actuations)
        print(f"  built in {time.perf_counter() - t0:.0f} s", file=sys.stderr)
    store = Store.open(str(path), readonly=True)
    run = store.runs()[0]
    n_act = store.engine.connect().exec_driver_sql("SELECT count(*) FROM actuations").scalar()
    n_roll = store.engine.connect().exec_driver_sql("SELECT count(*) FROM rollups").scalar()
    print(f"store: {path} ({path.stat().st_size / 1e9:.2f} GB), {n_act:,} actuations, {n_roll:,} rollup rows")
    unit = store.run_units(run.id)[0].unit

    warm = TrendCache()
    while not read_run(store, run.id, warm).complete:  # the screen has been open a while
        pass

    def all_due() -> None:
        """Every unit just completed a window: every trend is due for a re-read (within the budget)."""
        for k, (_, _, t) in list(warm._data.items()):
            warm._data[k] = (-1, -1e9, t)
        read_run(store, run.id, warm)

    def fill(read) -> None:
        """A screen's first open: batches read one after the other until every trend is in."""
        cache = TrendCache()
        while not read(cache).complete:
            pass

    pop_group = Group("part", unit.part_id, "BENCH-P")
    pop_warm = TrendCache()
    while not read_population(store, pop_group, pop_warm).complete:
        pass
    rows = [
        ("runs list refresh", lambda: read_overview(store), 100.0),
        ("units of a run: refresh", lambda: read_run(store, run.id, warm), 100.0),
        ("units of a run: refresh, every trend due", all_due, 100.0),
        ("units of a run: first open, first batch", lambda: read_run(store, run.id, TrendCache()), None),
        ("units of a run: first open, all batches", lambda: fill(lambda c: read_run(store, run.id, c)), None),
        (
            "one unit's history + 1,000-cycle histogram",
            lambda: read_history(store, unit.id, "make_bounce", None),
            None,
        ),
        ("population of a part: refresh", lambda: read_population(store, pop_group, pop_warm), 100.0),
        (
            "population of a part: first open, all batches",
            lambda: fill(lambda c: read_population(store, pop_group, c)),
            None,
        ),
    ]
    print(f"{'read':<46} {'median ms':>10} {'max ms':>8}   target")
    for name, fn, target in rows:
        med, mx = timed(fn, args.repeat)
        verdict = "" if target is None else (f"< {target:.0f} ms  {'met' if med < target else 'NOT MET'}")
        print(f"{name:<46} {med:>10.1f} {mx:>8.1f}   {verdict}")
    store.close()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
