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

`benchlog analyze FILE` on generated captures (`--edges 1000000 10000000`): 8 channels cycling 50 ms
on / 50 ms off, each make and break a bounce train of 0-6 reopenings, drive records as recorded,
a beat every ~200 edges as a sampler sends them, line and packed forms; edges/s (wall and CPU) and
peak RSS, beside a plain per-line Python loop (written below) that parses the same edges from the
line form and measures each burst's span and count, timed in the same run. Targets: analyze >= 3x the
plain loop's rate (CPU), >= 3 M edges/s for the packed form, peak RSS at the largest capture within
25 % of the smallest. Captures are generated (and the store built) in processes of their own.

    python tests/benchmarks/bench_scale.py [--actuations 10000000] [--keep PATH] [--repeat 3]
    python tests/benchmarks/bench_scale.py --skip-store --edges 1000000 10000000 [--captures DIR]

`--captures DIR` keeps the generated captures there (generated when missing, by the same seed), so a
second run measures without generating them again.
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


# -- captures ------------------------------------------------------------------------------------------
CHANNELS = 8
PERIOD_US = 100_000


def make_capture(path: Path, n_edges: int, form: str, seed: int = 11) -> None:
    """Write a capture of about `n_edges` edges (ticks of 1 us on a 32-bit counter: it wraps)."""
    import numpy as np

    from benchlog.wire import Announce, Beat, Drive, Edges, LineEncoder, PackedEncoder

    rng = np.random.default_rng(seed)
    enc = LineEncoder(8, 32) if form == "line" else PackedEncoder(32, 32)
    wrap = 1 << 32
    captured = 0
    with open(path, "wb") as fh:
        fh.write(enc.encode(Announce(1, 1_000_000, 32, CHANNELS, "BW-SCALE-8")))
        cycle = 0
        written = 0
        while written < n_edges:
            k = int(min(2000, max(1, -(-(n_edges - written) // (CHANNELS * 14)))))  # ~14 edges a cycle
            t_drive, ch_drive, lv_drive, t_e, ch_e, lv_e = [], [], [], [], [], []
            for ch in range(CHANNELS):
                on = (cycle + np.arange(k)) * PERIOD_US + ch * 997
                off = on + PERIOD_US // 2
                t_drive += [on, off]
                ch_drive += [np.full(k, ch)] * 2
                lv_drive += [np.ones(k, int), np.zeros(k, int)]
                for start, first_level in (
                    (on + rng.integers(4000, 7000, k), 1),
                    (off + rng.integers(2000, 4000, k), 0),
                ):
                    reopen = rng.integers(0, 7, k)
                    m = 1 + 2 * reopen  # edges in the burst
                    idx = np.repeat(np.arange(k), m)
                    pos = np.arange(m.sum()) - np.repeat(np.cumsum(m) - m, m)
                    gaps = rng.integers(20, 400, len(idx))
                    gaps[pos == 0] = 0
                    tt = (
                        np.repeat(start, m)
                        + np.cumsum(gaps)
                        - np.repeat(np.cumsum(gaps)[np.cumsum(m) - m], m)
                    )
                    t_e.append(tt)
                    ch_e.append(np.full(len(tt), ch))
                    lv_e.append(np.where(pos % 2 == 0, first_level, 1 - first_level))
            cycle += k
            te, ce, le = np.concatenate(t_e), np.concatenate(ch_e), np.concatenate(lv_e)
            td, cd, ld = np.concatenate(t_drive), np.concatenate(ch_drive), np.concatenate(lv_drive)
            # one stream in time order: drives sort before an edge at the same tick
            t_all = np.concatenate((td, te))
            kind = np.concatenate((np.zeros(len(td), int), np.ones(len(te), int)))
            ch_all = np.concatenate((cd, ce))
            lv_all = np.concatenate((ld, le))
            o = np.lexsort((kind, t_all))
            t_all, kind, ch_all, lv_all = t_all[o], kind[o], ch_all[o], lv_all[o]
            # records: runs of edges between drives, a beat after about every 200 edges
            out = []
            is_drive = np.flatnonzero(kind == 0)
            bounds = np.unique(np.r_[0, is_drive, len(kind)])
            since_beat = 0
            for a, b in zip(bounds[:-1], bounds[1:], strict=True):
                if kind[a] == 0:
                    out.append(Drive(int(ch_all[a]), int(lv_all[a]), int(t_all[a]) % wrap))
                    a += 1
                if b > a:
                    out.append(
                        Edges(
                            ch_all[a:b].astype(np.uint8),
                            lv_all[a:b].astype(np.uint8),
                            (t_all[a:b] % wrap).astype(np.uint64),
                        )
                    )
                    since_beat += b - a
                    captured += b - a
                    if since_beat >= 200:
                        out.append(Beat(int(t_all[b - 1]) % wrap, captured % wrap, 0))
                        since_beat = 0
            fh.write(b"".join(enc.encode(r) for r in out))
            written += len(te)


def plain_loop(path: str) -> tuple[int, int, float]:
    """The reference: a plain per-line Python loop over the line form. Parses every edge, unwraps the
    32-bit tick, and measures each burst (edges of one channel less than 10 ms apart): span and count.
    Returns (edges, bursts, total span in us)."""
    settle = 10_000
    wrap = 1 << 32
    last_raw = None
    base = 0
    first: dict[int, int] = {}
    prev: dict[int, int] = {}
    count: dict[int, int] = {}
    edges = bursts = 0
    span = 0.0
    with open(path, encoding="ascii") as fh:
        for line in fh:
            if not line.startswith("E "):
                continue
            _, ch_text, _level, rest = line.split(" ")
            raw = int(rest[: rest.index("*")], 16)
            if last_raw is not None and raw < last_raw:
                base += wrap
            last_raw = raw
            t = base + raw
            ch = int(ch_text, 16)
            edges += 1
            p = prev.get(ch)
            if p is None or t - p > settle:
                if p is not None:
                    bursts += 1
                    span += p - first[ch]
                first[ch] = t
                count[ch] = 0
            count[ch] += 1
            prev[ch] = t
    for ch, p in prev.items():
        bursts += 1
        span += p - first[ch]
    return edges, bursts, span


def timed(cmd: list[str], env: dict) -> tuple[float, float, int, float]:
    """(seconds, peak RSS MB, exit code, CPU seconds) of a child process (os.wait4 gives that child's
    rusage; Linux starts a child's peak at its parent's RSS, so this parent stays small: the store is
    built in a process of its own)."""
    t0 = time.perf_counter()
    p = subprocess.Popen(cmd, env=env, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
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


FIRST_TOUCH = """
import mmap, time
size = 64 << 20
m = mmap.mmap(-1, size)
def walk():
    t0 = time.perf_counter()
    for at in range(0, size, 4096):
        m[at] = 1
    return time.perf_counter() - t0
first = walk()
print((first - walk()) / (size // 4096) * 1e6)
"""


def first_touch_us() -> float:
    """Microseconds the kernel takes to give a process a page of memory it touches for the first time
    (64 MiB in a child of its own, the second walk over the same pages subtracted). A 1 M edge run of
    `benchlog analyze` touches 10,000-12,000 pages (4 KiB), the plain loop about 2,500, so this is part
    of the ratio: 2.6-3.1 us here when the machine had run for a while, several times more just after
    this virtual machine started (its host backs memory the first time the guest uses it)."""
    out = subprocess.run([sys.executable, "-c", FIRST_TOUCH], capture_output=True, text=True, check=True)
    return float(out.stdout)


def bench_captures(sizes: list[int], repeat: int, keep: str | None = None) -> None:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    # as on a lab's PC after the first run: Python keeps the compiled modules (an environment that
    # forbids writing them would charge every timed run the compiling)
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    touch = statistics.median(first_touch_us() for _ in range(3))
    line("a page's first touch on this machine (median of 3)", f"{touch:.1f} us", "for information", None)
    warm = False
    peaks: dict[str, list[float]] = {"line": [], "packed": []}
    with tempfile.TemporaryDirectory(prefix="bench-capture-") as tmp:
        d = Path(keep or tmp)
        d.mkdir(parents=True, exist_ok=True)
        for n in sizes:
            paths = {}
            for form in ("line", "packed"):
                paths[form] = d / f"cap-{n}.{form}"
                if paths[form].exists():
                    print(f"capture {form} ~{n:,} edges: {paths[form].stat().st_size / 1e6:,.0f} MB, kept")
                    continue
                t0 = time.perf_counter()
                part = paths[form].with_name(paths[form].name + ".part")
                cmd = [sys.executable, __file__, "--capture-only", str(part), str(n), form]
                subprocess.run(cmd, env=env, check=True)
                part.rename(paths[form])
                size = paths[form].stat().st_size
                secs = time.perf_counter() - t0
                print(f"capture {form} ~{n:,} edges: {size / 1e6:,.0f} MB, generated in {secs:,.0f} s")
            if not warm:  # one untimed run first, so the compiled modules exist
                subprocess.run(
                    [sys.executable, "-m", "benchlog", "analyze", str(paths["packed"]), "--json"],
                    env=env,
                    cwd=ROOT,
                    stdout=subprocess.DEVNULL,
                    check=True,
                )
                warm = True
            # the plain loop and both forms take turns, round by round, so a machine whose speed drifts
            # during the run (other work, frequency) moves all three alike, not the one timed last
            commands = {"plain": [sys.executable, __file__, "--plain-only", str(paths["line"])]}
            for form in ("line", "packed"):
                commands[form] = [sys.executable, "-m", "benchlog", "analyze", str(paths[form]), "--json"]
            timings: dict[str, list] = {k: [] for k in commands}
            for _ in range(repeat):
                for k, cmd in commands.items():
                    timings[k].append(timed(cmd, env))
            plain_cpu = statistics.median(r[3] for r in timings["plain"])
            for form in ("line", "packed"):
                runs = timings[form]
                if {r[2] for r in runs} != {0}:
                    print(f"  analyze {form}: exit codes {sorted({r[2] for r in runs})}   MISSED (failed)")
                wall = statistics.median(r[0] for r in runs)
                cpu = statistics.median(r[3] for r in runs)
                peak = max(r[1] for r in runs)
                peaks[form].append(peak)
                line(
                    f"analyze {form}, {n:,} edges: edges/s (wall, median)",
                    f"{n / wall:,.0f}",
                    "for information",
                    None,
                )
                rate_target = 3_000_000 if form == "packed" else None
                line(
                    f"analyze {form}, {n:,} edges: edges/s (CPU, median)",
                    f"{n / cpu:,.0f}",
                    ">= 3,000,000" if rate_target else "for information",
                    None if rate_target is None else n / cpu >= rate_target,
                )
                line(
                    f"analyze {form} / plain loop (CPU rates, same run)",
                    f"{plain_cpu / cpu:,.2f}x",
                    ">= 3x",
                    plain_cpu / cpu >= 3,
                )
                line(f"analyze {form}, {n:,} edges: peak RSS", f"{peak:,.0f} MB", "flat", None)
            line(
                f"plain per-line loop, {n:,} edges: edges/s (CPU)",
                f"{n / plain_cpu:,.0f}",
                "(reference)",
                None,
            )
    for form, p in peaks.items():
        if len(p) >= 2:
            line(
                f"analyze {form}: peak RSS, largest / smallest capture",
                f"{p[-1] / p[0]:.2f}",
                "<= 1.25",
                p[-1] / p[0] <= 1.25,
            )


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--actuations", type=int, default=10_000_000)
    ap.add_argument("--keep", help="store path kept between runs (built when missing)")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--build-only", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--capture-only", nargs=3, metavar=("PATH", "EDGES", "FORM"), help=argparse.SUPPRESS)
    ap.add_argument("--plain-only", metavar="PATH", help=argparse.SUPPRESS)
    ap.add_argument("--edges", type=int, nargs="*", default=[1_000_000, 10_000_000])
    ap.add_argument("--captures", metavar="DIR", help="captures kept between runs (generated when missing)")
    ap.add_argument("--skip-store", action="store_true", help="only the capture benchmark")
    ap.add_argument("--skip-captures", action="store_true", help="only the store benchmark")
    args = ap.parse_args()
    if args.capture_only:
        make_capture(Path(args.capture_only[0]), int(args.capture_only[1]), args.capture_only[2])
        return 0
    if args.plain_only:
        e, b, s = plain_loop(args.plain_only)
        print(f"{e} {b} {s}")
        return 0
    if args.build_only:
        secs = build(Path(args.keep), args.actuations)
        print(f"  built in {secs:,.0f} s ({args.actuations / secs:,.0f} actuations/s through the writer)")
        return 0
    if not args.skip_captures:
        bench_captures(args.edges, args.repeat, args.captures)
    if args.skip_store:
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
            [*exe, "report", *lots, "-o", str(path.with_suffix(".html")), "--force"],
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
