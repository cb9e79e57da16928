"""`benchlog debounce --db ... --part ...` on a store, the path a user runs: figures beside targets.

Two stores are built with the store writer from simulated bouncing contacts (edges kept, as `record`
keeps them): the demo's size (8 units x 3,000 cycles) and a full night (8 units x 200,000 cycles).
Targets (issue: the morning after): the demo part under 10 s, the night under 60 s, wall clock of the
whole command in a fresh process, median of several runs. Peak memory of the command (largest resident
set of its runs) under 4 GB, our own target: a lab PC of 8 GB that also records. The night once took
11.6 GB, holding every setting's scores at once.

Run: python tests/benchmarks/bench_debounce.py [night_cycles] [runs]
"""

from __future__ import annotations

import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from benchlog.design import group_edges  # noqa: E402
from benchlog.events import TimedEdges  # noqa: E402
from benchlog.store import END_TARGET, Store  # noqa: E402
from tests.design._bouncing import bouncing  # noqa: E402

MS = 1_000_000
UNITS = 8
CHUNK = 20_000  # cycles written per batch


def build(path: Path, cycles: int) -> None:
    store = Store.open(str(path))
    try:
        part = store.register_part("AG-MS5", "Ashgrove Components")
        lot = store.register_lot(part, "L1")
        units = {ch: store.register_unit(lot, f"AG-MS5-L1-{ch + 1:03d}") for ch in range(UNITS)}
        bench = store.register_bench("BW-BENCH-A", channels=16)
        w = store.start_run(bench, units, profile={"on_ms": 50, "off_ms": 50}, target_cycles=cycles)
        for ch in range(UNITS):
            e = bouncing(cycles, 100 * MS, np.log(0.8e6), 0.4, np.log(1.5e6), 0.35, seed=ch, channel=ch)
            rows = group_edges(e.t_ns, e.level, 5 * MS, channel=ch)
            rows["cycle"] -= 1
            edge_cut = np.searchsorted(e.t_ns, rows["t_start_ns"][:: 2 * CHUNK][1:])
            act_cut = np.arange(2 * CHUNK, len(rows), 2 * CHUNK)
            for a, ed_t, ed_c, ed_l in zip(
                np.split(rows, act_cut),
                np.split(e.t_ns, edge_cut),
                np.split(e.channel, edge_cut),
                np.split(e.level, edge_cut),
                strict=True,
            ):
                w.add(actuations=a, edges=TimedEdges(ed_t, ed_c, ed_l))
                w.flush()
        w.close(END_TARGET)
    finally:
        store.close()


def timed_command(db: Path, runs: int) -> list[float]:
    out = []
    for _ in range(runs):
        t0 = time.perf_counter()
        proc = subprocess.run(
            [sys.executable, "-m", "benchlog", "debounce", "--db", str(db), "--part", "AG-MS5"],
            capture_output=True,
            text=True,
            timeout=3600,
        )
        out.append(time.perf_counter() - t0)
        if proc.returncode != 0:
            print(proc.stderr.strip())
            raise SystemExit(f"debounce exited {proc.returncode}")
    return out


def main() -> None:
    night = int(sys.argv[1]) if len(sys.argv) > 1 else 200_000
    runs = int(sys.argv[2]) if len(sys.argv) > 2 else 3
    with tempfile.TemporaryDirectory() as tmp:
        for label, cycles, target in (("demo part", 3000, 10.0), ("full night", night, 60.0)):
            db = Path(tmp) / f"{cycles}.sqlite"
            t0 = time.perf_counter()
            build(db, cycles)
            print(f"{label}: {UNITS} units x {cycles:,} cycles stored in {time.perf_counter() - t0:.0f} s")
            times = timed_command(db, runs)
            med = statistics.median(times)
            flag = "" if med < target else "   MISSED"
            spread = ", ".join(f"{t:.1f}" for t in times)
            print(f"  debounce --part: median {med:.1f} s of {runs} ({spread})   target < {target:g} s{flag}")
            # the largest of every child so far: the night runs after the demo, so this is its own
            peak_gb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss * 1024 / 1e9
            flag = "" if peak_gb < 4 else "   MISSED"
            print(f"  peak resident memory: {peak_gb:.2f} GB   target < 4 GB{flag}")


if __name__ == "__main__":
    main()
