"""Analog capture reading and measuring: figures printed beside their targets.

A 10 M-point capture with 2 voltage channels, written as a scope would export it (a header, a time column
in scientific notation, two voltage columns with a sign, comma-separated), is read with
`benchlog.analog.read_capture` and both channels are measured by the 90 % / 10 us rule through the
analysis stage: the path `benchlog scope` runs. A point is one row (one instant, both channels). Each run
is a fresh child process, so its peak RSS (getrusage) is its own; medians of the runs are printed.

The same capture is also written unpadded (no blank where a sign is not, so lines differ in length), and
in the shortest form as `%g` prints it (no blank for a sign, no trailing zeros: '5', '4.99', '-0.0123',
time as '-0.0009999'), as loggers and many scope exports do: each field then has its own length and its
own count of decimals. Their parse rates are printed against the same target.

Targets: parse >= 5 M points/s; measure (after parsing, both channels) >= 20 M points/s; peak memory
above the child's baseline (interpreter and libraries loaded) < 3x the decoded arrays.

Run: python tests/benchmarks/bench_scope.py [points] [runs]
"""

from __future__ import annotations

import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from benchlog.analog import render_contact  # noqa: E402


def _fixed(x: np.ndarray, whole: int, decimals: int) -> np.ndarray:
    """Rows of ASCII bytes: sign (or space), `whole` digits, '.', `decimals` digits."""
    m = np.round(np.abs(x) * 10**decimals).astype(np.int64)
    width = whole + decimals
    digits = (m[:, None] // (10 ** np.arange(width - 1, -1, -1))[None, :]) % 10
    out = np.empty((len(x), width + 2), np.uint8)
    out[:, 0] = np.where(x < 0, ord("-"), ord(" "))
    out[:, 1 : 1 + whole] = digits[:, :whole] + 48
    out[:, 1 + whole] = ord(".")
    out[:, 2 + whole :] = digits[:, whole:] + 48
    return out


def _scientific(x: np.ndarray, decimals: int) -> np.ndarray:
    """Rows of ASCII bytes like '-1.234567E-03' (exponent within +-99)."""
    a = np.abs(x)
    e = np.where(a > 0, np.floor(np.log10(np.where(a > 0, a, 1.0))), 0).astype(np.int64)
    mant = np.round(a / 10.0**e * 10**decimals).astype(np.int64)
    roll = mant >= 10 ** (decimals + 1)
    mant = np.where(roll, mant // 10, mant)
    e = np.where(roll, e + 1, e)
    digits = (mant[:, None] // (10 ** np.arange(decimals, -1, -1))[None, :]) % 10
    out = np.empty((len(x), decimals + 7), np.uint8)
    out[:, 0] = np.where(x < 0, ord("-"), ord(" "))
    out[:, 1] = digits[:, 0] + 48
    out[:, 2] = ord(".")
    out[:, 3 : 3 + decimals] = digits[:, 1:] + 48
    out[:, 3 + decimals] = ord("E")
    out[:, 4 + decimals] = np.where(e < 0, ord("-"), ord("+"))
    out[:, 5 + decimals] = np.abs(e) // 10 + 48
    out[:, 6 + decimals] = np.abs(e) % 10 + 48
    return out


def _shortest(field: np.ndarray, point: int) -> np.ndarray:
    """A fixed-format field (rows of bytes, the decimal point at column `point`) as %g prints it: trailing
    zeros after the point, and a point with nothing after it, become blanks (left out when written)."""
    out = field.copy()
    tail = np.logical_and.accumulate(out[:, :point:-1] == ord("0"), axis=1)[:, ::-1]
    out[:, point + 1 :][tail] = ord(" ")
    out[tail[:, 0], point] = ord(" ")
    return out


def write_capture(path: Path, points: int, padded: bool = True, shortest: bool = False) -> None:
    """A 2-channel capture of a bouncing contact (one make and one break on each channel every 20 ms).
    Unpadded, the blanks that stand where a sign is not are left out (lines then differ in length);
    `shortest` also drops trailing zeros, and prints time as a plain decimal (%g's form for it)."""
    dt_ns = 100.0
    rng = np.random.default_rng(1)
    with path.open("wb") as f:
        f.write(b"Benchmark capture (synthetic)\nSample Interval,1.000000E-07\nTime,CH1,CH2\n")
        block = 1_000_000
        for a in range(0, points, block):
            n = min(block, points - a)
            t0 = a * dt_ns
            cols = []
            for ch in (0, 1):
                period = 20_000_000
                first = (t0 // period) * period
                starts = first + np.arange(-1, n * dt_ns // period + 2) * period + 1_000_000 * (ch + 1)
                edges, levels = [], []
                for s in starts:
                    bounce = s + np.cumsum(rng.uniform(20_000, 200_000, 6))
                    edges += [s, *bounce[:4], s + 10_000_000, *(s + 10_000_000 + bounce[4:] - s)]
                    levels += [1, 0, 1, 0, 1, 0, 1, 0]
                edges_a = np.asarray(edges, np.float64) - t0
                v = render_contact(edges_a, np.array(levels), 0, start_ns=0.0, dt_ns=dt_ns, n=n, v_open=5.0,
                                   noise_v=0.01, rng=rng)  # fmt: skip
                cols.append(_fixed(v, 1, 4))
            t = (a + np.arange(n)) * dt_ns * 1e-9 - 1e-3
            comma = np.full((n, 1), ord(","), np.uint8)
            nl = np.full((n, 1), ord("\n"), np.uint8)
            if shortest:
                fields = [_shortest(_fixed(t, 1, 7), 2), _shortest(cols[0], 2), _shortest(cols[1], 2)]
            else:
                fields = [_scientific(t, 6), cols[0], cols[1]]
            rows = np.hstack((fields[0], comma, fields[1], comma, fields[2], nl)).ravel()
            f.write((rows if padded else rows[rows != ord(" ")]).tobytes())


CHILD = r"""
import json, sys, time
sys.path.insert(0, sys.argv[2])
from benchlog.analog import fraction_levels, measure_capture, open_circuit_level, read_capture
from benchlog.analysis import AnalysisSettings

def high_water():  # this process's own peak RSS (getrusage's survives exec, so it may be the parent's)
    with open("/proc/self/status") as f:
        return next(int(x.split()[1]) * 1024 for x in f if x.startswith("VmHWM:"))

base = high_water()
t0, c0 = time.perf_counter(), time.process_time()
cap = read_capture(sys.argv[1])
t1, c1 = time.perf_counter(), time.process_time()
found = []
for ch in range(len(cap.names)):
    v = cap.volts[ch]
    levels = fraction_levels(open_circuit_level(v))
    m = measure_capture(cap, ch, levels, AnalysisSettings(settle_ns=5_000_000))
    found.append(len(m.actuations))
t2, c2 = time.perf_counter(), time.process_time()
decoded = sum(a.nbytes for a in cap.volts) + (cap.t_s.nbytes if cap.t_s is not None else 0)
out = {"parse": t1 - t0, "measure": t2 - t1, "parse_cpu": c1 - c0, "measure_cpu": c2 - c1}
out.update(base=base, peak=high_water(), decoded=decoded, rows=len(cap), actuations=found)
print(json.dumps(out))
"""


def _runs(path: Path, runs: int) -> list[dict]:
    results = []
    for _ in range(runs):
        out = subprocess.run(
            [sys.executable, "-c", CHILD, str(path), str(ROOT)], capture_output=True, text=True, check=True
        )
        results.append(json.loads(out.stdout))
    return results


def main() -> None:
    points = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000_000
    runs = int(sys.argv[2]) if len(sys.argv) > 2 else 3
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "capture.csv"
        t0 = time.perf_counter()
        write_capture(path, points)
        size = os.path.getsize(path)
        print(f"capture: {points:,} points x 2 channels, {size / 1e6:.0f} MB CSV (written in "
              f"{time.perf_counter() - t0:.1f} s)")  # fmt: skip
        results = _runs(path, runs)
        path.unlink()
        loose = Path(tmp) / "unpadded.csv"
        write_capture(loose, points, padded=False)
        loose_size = os.path.getsize(loose)
        loose_results = _runs(loose, runs)
        loose.unlink()
        short = Path(tmp) / "shortest.csv"
        write_capture(short, points, padded=False, shortest=True)
        short_size = os.path.getsize(short)
        short_results = _runs(short, runs)
    rows = results[0]["rows"]
    assert rows == points, f"read {rows} rows of {points}"
    assert loose_results[0]["rows"] == points, f"read {loose_results[0]['rows']} unpadded rows of {points}"
    assert loose_results[0]["actuations"] == results[0]["actuations"], "the unpadded capture measured apart"
    assert short_results[0]["rows"] == points, (
        f"read {short_results[0]['rows']} shortest-form rows of {points}"
    )
    assert short_results[0]["actuations"] == results[0]["actuations"], "the shortest form measured apart"
    keys = ("parse", "measure", "parse_cpu", "measure_cpu")
    med = {k: statistics.median(r[k] for r in results) for k in keys}
    loose_med = {k: statistics.median(r[k] for r in loose_results) for k in keys}
    short_med = {k: statistics.median(r[k] for r in short_results) for k in keys}
    extra = statistics.median(r["peak"] - r["base"] for r in results)
    loose_extra = statistics.median(r["peak"] - r["base"] for r in loose_results)
    decoded = results[0]["decoded"]
    print(f"actuations found per channel: {results[0]['actuations']} (runs: {runs}, medians below)")

    def line(label: str, value: float, target: str, ok: bool) -> None:
        print(f"{label:<52} {value:>9.2f}   target {target:<8} {'' if ok else 'MISSED'}")

    line("parse, M points/s", rows / med["parse"] / 1e6, ">= 5", rows / med["parse"] >= 5e6)
    line("parse, unpadded lines, M points/s", rows / loose_med["parse"] / 1e6, ">= 5",
         rows / loose_med["parse"] >= 5e6)  # fmt: skip
    line("parse, shortest form (%g), M points/s", rows / short_med["parse"] / 1e6, ">= 5",
         rows / short_med["parse"] >= 5e6)  # fmt: skip
    line("measure both channels after parsing, M points/s", rows / med["measure"] / 1e6, ">= 20",
         rows / med["measure"] >= 20e6)  # fmt: skip
    line("peak RSS above baseline / decoded arrays", extra / decoded, "< 3", extra < 3 * decoded)
    line("peak RSS above baseline / decoded arrays, unpadded", loose_extra / decoded, "< 3",
         loose_extra < 3 * decoded)  # fmt: skip
    print("  a point is one row (one instant of both channels); per channel sample the rates double")
    print(
        f"  parse {size / med['parse'] / 1e6:.0f} MB/s of CSV; CPU time alone (the machine may be shared): "
        f"parse {rows / med['parse_cpu'] / 1e6:.2f} M points/s, "
        f"measure {rows / med['measure_cpu'] / 1e6:.2f} M points/s"
    )
    print(
        f"  unpadded ({loose_size / 1e6:.0f} MB): parse {loose_size / loose_med['parse'] / 1e6:.0f} MB/s; "
        f"CPU time alone: parse {rows / loose_med['parse_cpu'] / 1e6:.2f} M points/s"
    )
    print(
        f"  shortest form ({short_size / 1e6:.0f} MB): "
        f"parse {short_size / short_med['parse'] / 1e6:.0f} MB/s; "
        f"CPU time alone: parse {rows / short_med['parse_cpu'] / 1e6:.2f} M points/s"
    )
    print(
        f"  decoded arrays {decoded / 1e6:.0f} MB (time kept as a grid); peak RSS above baseline "
        f"{extra / 1e6:.0f} MB; baseline (interpreter and libraries) {results[0]['base'] / 1e6:.0f} MB"
    )


if __name__ == "__main__":
    main()
