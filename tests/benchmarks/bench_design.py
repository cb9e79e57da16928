"""Debounce designer speed on a long recording: figures printed beside their targets.

A night of life test is 200,000 cycles (400,000 makes and breaks). Targets: one debouncer replay (all
channels, one parameter) well under a second per million edges; the whole software design (four
debouncers, their sweeps, life windows) and one RC candidate checked at every tolerance corner in
minutes, not hours. Run: python tests/benchmarks/bench_design.py [cycles]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from benchlog.design import (  # noqa: E402
    Circuit,
    channel_record,
    check_rc,
    design_software,
    find_input,
    load_thresholds,
    replay,
    sample_runs,
)
from tests.design._bouncing import bouncing  # noqa: E402

MS = 1_000_000


def main() -> None:
    cycles = int(sys.argv[1]) if len(sys.argv) > 1 else 200_000
    t0 = time.perf_counter()
    e = bouncing(cycles, 40 * MS, np.log(0.8e6), 0.4, np.log(1.5e6), 0.35, seed=1)
    rec = channel_record(e.t_ns, e.level, None, 0, 5 * MS, int(e.t_ns[-1]) + 20 * MS)
    print(
        f"recording: {cycles} cycles, {len(e)} edges, {len(rec.actuations)} actuations "
        f"(built in {time.perf_counter() - t0:.2f} s)"
    )
    t0 = time.perf_counter()
    runs = sample_runs(rec.t_ns, rec.level, MS, rec.initial)
    t_runs = time.perf_counter() - t0
    per_medge = 1e6 / len(e)
    print(f"sampling at 1 ms into runs: {t_runs:.3f} s ({t_runs * per_medge:.3f} s per million edges)")
    for kind in ("lockout", "stable", "integrator", "confirm"):
        t0 = time.perf_counter()
        replay(runs, kind, 8)
        dt = time.perf_counter() - t0
        print(f"replay {kind:<10} n=8: {dt:.3f} s = {dt * per_medge:.3f} s per million edges   target < 1 s")
    t0 = time.perf_counter()
    soft = design_software([rec], MS, 1e-6)
    dt = time.perf_counter() - t0
    points = sum(len(v) for v in soft.sweeps.values())
    print(f"software design ({points} sweep points + choices + life): {dt:.1f} s   target < 300 s")
    th = find_input(load_thresholds(), "CMOS Schmitt inverter, 5 V")
    circ = Circuit(5.0, 0.05, (9.9e3, 10.1e3), 0.05, 0.10, th)
    t0 = time.perf_counter()
    c = check_rc([rec], circ, 1e3, 470e-9, 0.2)
    dt = time.perf_counter() - t0
    print(f"one RC candidate, {c.corners} corners + nominal, every actuation: {dt:.1f} s  target < 120 s")


if __name__ == "__main__":
    main()
