"""Store and recorder benchmark; prints each figure beside its target.

Run: python tests/benchmarks/bench_store.py [--hours H] [--pg URL] [--skip ingest trend read recorder]

1. Ingest into SQLite: actuations/s through the store's write path (RunWriter: numpy batch in,
   per-unit prepared INSERT via sqlite3 executemany, rollups, progress, commit), target >= 250 k/s;
   and the ratio to plain sqlite3 executemany of the same rows (pre-built tuples, same table, same
   pragmas, same batch size and commits) measured in the same run, target >= 0.6. Rounds alternate
   between the two; the figures and the ratio are the medians of the rounds.
2. Trend query: `Store.trend` for one unit with 10 M actuations (5 M cycles, makes and breaks), from
   rollups written directly at that scale (generating 10 M raw rows would only slow the benchmark;
   the trend never reads them), target < 200 ms.
3. Read: `Store.actuations()` of a 1 M-actuation store (8 units, NaN in some metrics), actuations/s,
   target >= 1 M/s, beside the row-by-row read through SQLAlchemy (one Python tuple per row, the
   earlier path) in the same run; on the SQLite file, and on PostgreSQL too when `--pg URL` (or
   BENCHLOG_TEST_PG_URL) names a server (the store goes into a schema of its own, dropped after).
4. Recorder memory: a simulated 24 h run of 8 channels at 10 cycles/s (6.9 M cycles, 13.8 M
   actuations) pushed through the real Recorder (analysis, life judge, store writer with raw edges
   and rollups) as fast as it goes, in a process of its own (started first, so no other section's
   memory is in its figures); RSS is sampled every simulated hour. Checks: peak RSS (the process's
   own high-water mark, VmHWM) <= 250 MB, and flat: the least-squares slope of RSS over hours 1 to
   the end, times the hours, < 5 MB (a store writer whose state grew with the run rose about 1 MB an
   hour).
"""

from __future__ import annotations

import argparse
import os
import resource
import sqlite3
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from benchlog.analysis import AnalysisSettings, empty_actuations  # noqa: E402
from benchlog.events import TimedDrives, TimedEdges  # noqa: E402
from benchlog.recorder import Recorder  # noqa: E402
from benchlog.store import ROLLUP_METRICS, Store  # noqa: E402
from benchlog.store._write import _SQLITE_ACT_INSERT, bulk_insert_rollups, to_stored  # noqa: E402


def line(name: str, value: str, target: str, ok: bool) -> None:
    print(f"{name:<58} {value:>16}   target {target:<12} {'ok' if ok else 'MISSED'}", flush=True)


def rss_mb(field: str = "VmRSS") -> float:
    """This process's resident (VmRSS) or peak resident (VmHWM) memory. VmHWM belongs to the process's
    own address space, unlike ru_maxrss, which Linux carries over from the parent at fork."""
    for row in Path("/proc/self/status").read_text().splitlines():
        if row.startswith(field + ":"):
            return int(row.split()[1]) / 1024
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def synthetic_actuations(channels: int, cycles: int, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    n = channels * cycles * 2
    a = empty_actuations(n)
    a["channel"] = np.repeat(np.arange(channels, dtype=np.uint8), cycles * 2)
    a["cycle"] = np.tile(np.repeat(np.arange(cycles), 2), channels)
    a["kind"] = np.tile([0, 1], channels * cycles)
    a["t_start_ns"] = a["cycle"] * 100_000_000 + a["kind"].astype(np.int64) * 50_000_000
    a["t_first_ns"] = a["t_start_ns"] + rng.integers(3_000_000, 8_000_000, n)
    a["t_settle_ns"] = a["t_first_ns"] + rng.integers(0, 2_000_000, n)
    a["t_end_ns"] = a["t_start_ns"] + 50_000_000
    a["transit_us"] = (a["t_first_ns"] - a["t_start_ns"]) / 1000
    a["bounce_us"] = (a["t_settle_ns"] - a["t_first_ns"]) / 1000
    a["bounce_count"] = rng.integers(0, 6, n)
    a["longest_gap_us"] = a["bounce_us"] / 3
    a["wrong_state_us"] = a["bounce_us"] / 2
    a["transfer_us"] = np.nan
    a["drive_level"] = 1 - a["kind"].astype(np.int64)
    return a


def new_run(path: str, channels: int, window: int = 100):
    store = Store.open(path)
    part = store.register_part("AG-R12", "Ashgrove Components")
    lot = store.register_lot(part, "B1")
    units = {ch: store.register_unit(lot, f"B-{ch}") for ch in range(channels)}
    bench = store.register_bench("bench B")
    writer = store.start_run(bench, units, profile={"on_ms": 50, "off_ms": 50}, rollup_window=window)
    return store, writer, units


# -- 1. ingest --------------------------------------------------------------------------------------
def bench_ingest(tmp: Path, rounds: int, cycles: int, batch: int) -> None:
    channels = 8
    acts = synthetic_actuations(channels, cycles)
    ours, raw = [], []
    for r in range(rounds):
        store, writer, units = new_run(str(tmp / f"ours{r}.sqlite"), channels)
        t0 = time.perf_counter()
        for i in range(0, len(acts), batch):
            writer.add(actuations=acts[i : i + batch])
            writer.flush()
        ours.append(len(acts) / (time.perf_counter() - t0))
        writer.close("stopped")
        store.close()

        path = tmp / f"raw{r}.sqlite"
        store, writer, units = new_run(str(path), channels)
        writer.close("stopped")
        lut = np.zeros(256, np.int64)
        for ch, u in units.items():
            lut[ch] = u
        rows = to_stored(acts, lut[acts["channel"]], writer.run_id).tolist()  # prepared beforehand
        store.close()
        con = sqlite3.connect(path)
        for pragma in ("journal_mode=WAL", "synchronous=NORMAL", "foreign_keys=ON", "busy_timeout=10000"):
            con.execute(f"PRAGMA {pragma}")
        t0 = time.perf_counter()
        for i in range(0, len(rows), batch):
            con.executemany(_SQLITE_ACT_INSERT, rows[i : i + batch])
            con.commit()
        raw.append(len(rows) / (time.perf_counter() - t0))
        con.close()
    best_ours, best_raw = statistics.median(ours), statistics.median(raw)
    print(
        f"ingest: {len(acts):,} actuations x {rounds} rounds, batches of {batch:,}; "
        f"best: store {max(ours):,.0f}/s, raw {max(raw):,.0f}/s (for information)"
    )
    line(
        "ingest into SQLite through the store (median, actuations/s)",
        f"{best_ours:,.0f}",
        ">= 250,000",
        best_ours >= 250_000,
    )
    line("plain sqlite3 executemany, same rows (median, /s)", f"{best_raw:,.0f}", "(reference)", True)
    line(
        "ratio of the medians, store / plain executemany",
        f"{best_ours / best_raw:.2f}",
        ">= 0.60",
        best_ours / best_raw >= 0.6,
    )


# -- 2. trend ---------------------------------------------------------------------------------------
def bench_trend(tmp: Path, actuations: int, window: int) -> None:
    store, writer, units = new_run(str(tmp / "trend.sqlite"), 4, window)
    writer.close("stopped")
    cycles = actuations // 2
    windows = cycles // window
    rng = np.random.default_rng(1)
    t0 = time.perf_counter()
    with store.engine.connect() as conn:
        for unit in units.values():  # the measured unit and three neighbours of the same size
            for kind in (0, 1):
                w = np.arange(windows)
                p50 = rng.gamma(2.0, 400.0, windows)
                base = [(unit, m, kind, writer.run_id) for m in ROLLUP_METRICS]
                rows = [
                    (*b, wi, wi * window, wi * window + window - 1, window, v, v * 1.6, v * 2.1, v * window)
                    for b in base
                    for wi, v in zip(w.tolist(), p50.tolist(), strict=True)
                ]
                with conn.begin():
                    bulk_insert_rollups(conn, rows)
    build = time.perf_counter() - t0
    store.close()
    ro = Store.open(str(tmp / "trend.sqlite"), readonly=True)
    unit = units[1]
    t0 = time.perf_counter()
    tr = ro.trend(unit, "bounce_us", kind="make")
    cold = time.perf_counter() - t0
    times = []
    for _ in range(5):
        t0 = time.perf_counter()
        tr = ro.trend(unit, "bounce_us", kind="make")
        times.append(time.perf_counter() - t0)
    ro.close()
    assert len(tr) == windows and tr.cycle_hi[-1] == cycles - 1
    print(
        f"trend: unit of {actuations:,} actuations = {windows:,} windows per kind "
        f"({windows * 2 * len(ROLLUP_METRICS) * 4:,} rollup rows in the table, built in {build:.1f} s)"
    )
    line("trend query, one unit, one metric (first call, ms)", f"{cold * 1000:.0f}", "< 200", cold < 0.2)
    line(
        "trend query, one unit, one metric (best of 5, ms)",
        f"{min(times) * 1000:.0f}",
        "< 200",
        min(times) < 0.2,
    )


# -- 3. read ----------------------------------------------------------------------------------------
def _rows_one_by_one(store) -> np.ndarray:
    """The earlier read path: SQLAlchemy rows, one Python tuple per row, then np.array."""
    from sqlalchemy import select

    from benchlog.store import _schema as sch
    from benchlog.store._write import ACT_FIELDS, STORED_ACTUATION_DTYPE

    a = sch.Actuation.__table__.c
    q = select(*[a[n] for n in ACT_FIELDS]).order_by(a.unit_id, a.cycle, a.kind)
    with store.engine.connect() as c:
        rows = c.execute(q).all()
    return np.array([tuple(r) for r in rows], dtype=STORED_ACTUATION_DTYPE)


def _read_figures(label: str, url: str, actuations: int, rounds: int) -> None:
    channels = 8
    store, writer, units = new_run(url, channels)
    acts = synthetic_actuations(channels, actuations // (2 * channels))
    acts["bounce_us"][::5] = np.nan
    t0 = time.perf_counter()
    for i in range(0, len(acts), 100_000):
        writer.add(actuations=acts[i : i + 100_000])
        writer.flush()
    writer.close("stopped")
    build = time.perf_counter() - t0
    store.close()
    ro = Store.open(url, readonly=True)
    ours, old = [], []
    for _ in range(rounds):
        t0 = time.perf_counter()
        got = ro.actuations()
        ours.append(len(got) / (time.perf_counter() - t0))
        t0 = time.perf_counter()
        ref = _rows_one_by_one(ro)
        old.append(len(ref) / (time.perf_counter() - t0))
    ro.close()
    assert len(got) == len(ref) == len(acts)
    assert all(np.array_equal(got[n], ref[n], equal_nan=got[n].dtype.kind == "f") for n in got.dtype.names)
    print(f"read ({label}): {len(acts):,} actuations of {channels} units (store built in {build:.1f} s)")
    best = max(ours)
    line(f"Store.actuations(), {label} (actuations/s)", f"{best:,.0f}", ">= 1,000,000", best >= 1_000_000)
    line(f"row by row through SQLAlchemy, {label} (actuations/s)", f"{max(old):,.0f}", "(reference)", True)


def bench_read(tmp: Path, actuations: int, rounds: int, pg_url: str | None) -> None:
    _read_figures("SQLite", str(tmp / "read.sqlite"), actuations, rounds)
    if not pg_url:
        return
    import uuid

    from sqlalchemy import create_engine, text

    schema = "bench_" + uuid.uuid4().hex[:10]
    admin = create_engine(pg_url)
    with admin.begin() as c:
        c.execute(text(f'CREATE SCHEMA "{schema}"'))
    try:
        sep = "&" if "?" in pg_url else "?"
        _read_figures("PostgreSQL", f"{pg_url}{sep}options=-csearch_path%3D{schema}", actuations, rounds)
    finally:
        with admin.begin() as c:
            c.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
        admin.dispose()


# -- 4. recorder memory -----------------------------------------------------------------------------
def synthetic_hour(
    t0_ns: int, cycle0: int, cycles: int, channels: int, rng
) -> tuple[TimedEdges, TimedDrives]:
    """`cycles` cycles (50 ms on, 50 ms off) on every channel: drive records and bouncing contacts."""
    period = 100_000_000
    starts = t0_ns + (cycle0 + np.arange(cycles, dtype=np.int64)) * period
    ts, chs, lvs, dts, dch, dlv = [], [], [], [], [], []
    for ch in range(channels):
        on, off = starts, starts + period // 2
        dts += [on, off]
        dch += [np.full(cycles, ch), np.full(cycles, ch)]
        dlv += [np.ones(cycles), np.zeros(cycles)]
        # make: close at +5 ms, open/close bounce pairs; break: open at +3 ms, one reclose pair
        m = on + rng.integers(4_000_000, 7_000_000, cycles)
        b = off + rng.integers(2_000_000, 4_000_000, cycles)
        g = rng.integers(50_000, 300_000, (cycles, 4))
        seq = np.stack([m, m + g[:, 0], m + g[:, 0] + g[:, 1], b, b + g[:, 2], b + g[:, 2] + g[:, 3]], 1)
        lv = np.tile(np.array([1, 0, 1, 0, 1, 0], np.uint8), (cycles, 1))
        ts.append(seq.ravel())
        lvs.append(lv.ravel())
        chs.append(np.full(seq.size, ch))
    t = np.concatenate(ts)
    o = np.argsort(t, kind="stable")
    edges = TimedEdges(t[o], np.concatenate(chs).astype(np.uint8)[o], np.concatenate(lvs)[o])
    dt = np.concatenate(dts)
    o2 = np.argsort(dt, kind="stable")
    drives = TimedDrives(
        dt[o2], np.concatenate(dch).astype(np.uint8)[o2], np.concatenate(dlv).astype(np.uint8)[o2]
    )
    return edges, drives


class _Timed:
    __slots__ = ("edges", "drives", "incidents", "beats")

    def __init__(self, edges, drives) -> None:
        self.edges, self.drives, self.incidents, self.beats = edges, drives, [], None


def bench_recorder(tmp: Path, hours: float, channels: int, rate_cps: float, batch_s: float) -> None:
    store, writer, units = new_run(str(tmp / "day.sqlite"), channels)
    rec = Recorder(writer, settings=AnalysisSettings(settle_ns=2_000_000), fail_after=5, flush_every_s=0)
    rng = np.random.default_rng(2)
    per_batch = int(rate_cps * batch_s)
    total = int(hours * 3600 * rate_cps)
    samples = []
    t_start = time.perf_counter()
    start_rss = rss_mb()
    done = 0
    next_sample = 0
    while done < total:
        n = min(per_batch, total - done)
        edges, drives = synthetic_hour(0, done, n, channels, rng)
        rec.push(_Timed(edges, drives))
        rec.maybe_flush(force=True)
        done += n
        if done >= next_sample:
            samples.append((done / rate_cps / 3600, rss_mb()))
            next_sample += int(3600 * rate_cps)
    rec.finish("target")
    wall = time.perf_counter() - t_start
    peak = rss_mb("VmHWM")
    with Store.open(str(tmp / "day.sqlite"), readonly=True) as ro:
        n_act = len(ro.actuations(units=[units[0]], cycles=(0, 999)))
        run = ro.run(writer.run_id)
    store.close()
    print(
        f"recorder: {hours:g} h x {channels} channels x {rate_cps:g} cycles/s = {total:,} cycles a channel, "
        f"{rec.actuations:,} actuations in {wall:.0f} s ({hours * 3600 / wall:.0f}x real time); "
        f"run ended at {run.cycles_done:,} cycles ({n_act} actuations in unit 0's first 1000 cycles)"
    )
    print("  RSS by simulated hour (MB): " + "  ".join(f"{h:.0f}h:{m:.0f}" for h, m in samples))
    later = np.array([(h, m) for h, m in samples if h >= 1])
    if len(later) >= 3:
        slope = float(np.polyfit(later[:, 0], later[:, 1], 1)[0])
        growth = slope * float(later[-1, 0] - later[0, 0])
    else:
        growth = float("nan")
    line("recorder peak RSS over the run (VmHWM, MB)", f"{peak:.0f}", "<= 250", peak <= 250)
    line(
        "RSS trend from hour 1 to the end (fitted slope x hours, MB)",
        f"{growth:+.0f}",
        "< 5",
        bool(growth < 5),
    )
    del start_rss


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--ingest-cycles", type=int, default=25_000, help="cycles per channel (8 channels)")
    ap.add_argument("--batch", type=int, default=50_000)
    ap.add_argument("--trend-actuations", type=int, default=10_000_000)
    ap.add_argument("--hours", type=float, default=24.0)
    ap.add_argument("--read-actuations", type=int, default=1_000_000)
    ap.add_argument(
        "--pg", default=os.environ.get("BENCHLOG_TEST_PG_URL"), help="PostgreSQL URL for the read"
    )
    ap.add_argument("--skip", nargs="*", default=[], choices=["ingest", "trend", "read", "recorder"])
    args = ap.parse_args()
    if "recorder" not in args.skip and len(args.skip) < 3:
        # the recorder in a process of its own, before anything else grows this one
        import subprocess

        me = [sys.executable, __file__, "--hours", str(args.hours), "--skip", "ingest", "trend", "read"]
        subprocess.run(me, check=True)
        args.skip.append("recorder")
    with tempfile.TemporaryDirectory(prefix="benchlog-bench-") as d:
        tmp = Path(d)
        if "ingest" not in args.skip:
            bench_ingest(tmp, args.rounds, args.ingest_cycles, args.batch)
        if "trend" not in args.skip:
            bench_trend(tmp, args.trend_actuations, 100)
        if "read" not in args.skip:
            bench_read(tmp, args.read_actuations, args.rounds, args.pg)
        if "recorder" not in args.skip:
            bench_recorder(tmp, args.hours, 8, 10.0, 60.0)


if __name__ == "__main__":
    main()
