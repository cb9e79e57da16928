"""Segment + measure speed of benchlog.analysis, beside its target, and its memory over a long stream.

    python tests/benchmarks/bench_analysis.py [--edges N] [--chunk EDGES]

The stream is a life-test bench's: 8 channels, drive-anchored cycles of 50 ms on / 50 ms off, each make
and break a bounce train of 0-6 reopenings, now and then a chatter opening. It is generated in chunks
(outside the timed part) and fed to one Analyzer on one core. The actuations it returns are checked
against the generator's own count, so the figure measures real work.

Targets (the analysis issue): segment + measure >= 3 M edges/s; memory proportional to the chunk, not
the run (the peak over a long stream stays flat). The reference for "never the bottleneck" is the
link's end-to-end target of 1 M edges/s (sim -> pty -> decoder); benchlog has no importable helper
that measures the link end to end, so this script prints that target, and beside it measures in the
same run the host-side software of that path (Decoder + Timeline) on the same edges as packed bytes.
"""

from __future__ import annotations

import argparse
import time
import tracemalloc

import numpy as np

from benchlog.analysis import AnalysisSettings, Analyzer
from benchlog.events import TimedDrives, TimedEdges

TARGET = 3_000_000
LINK_END_TO_END_TARGET = 1_000_000
MS = 1_000_000
PERIOD = 100 * MS
MAX_B = 6


def chunk_stream(first_cycle: int, n_cycles: int, channels: int, rng: np.random.Generator):
    """`n_cycles` cycles on every channel from `first_cycle` on, sorted by time."""
    k = n_cycles * channels
    ch = np.tile(np.arange(channels, dtype=np.uint8), n_cycles)
    cyc = np.repeat(np.arange(first_cycle, first_cycle + n_cycles), channels)
    t_on = cyc * PERIOD + ch.astype(np.int64) * 997_000
    t_off = t_on + 50 * MS
    t_parts, c_parts, l_parts = [], [], []
    for start, level in ((t_on + 5 * MS, 1), (t_off + 3 * MS, 0)):
        n = rng.integers(0, MAX_B + 1, k)
        steps = rng.integers(20_000, 300_000, (k, 2 * MAX_B))
        offs = np.concatenate([np.zeros((k, 1), np.int64), np.cumsum(steps, axis=1)], axis=1)
        valid = np.arange(2 * MAX_B + 1)[None, :] <= 2 * n[:, None]
        lv = np.where(np.arange(2 * MAX_B + 1) % 2 == 0, level, 1 - level).astype(np.uint8)
        t_parts.append((start[:, None] + offs)[valid])
        c_parts.append(np.broadcast_to(ch[:, None], offs.shape)[valid])
        l_parts.append(np.broadcast_to(lv[None, :], offs.shape)[valid])
    chat = rng.random(k) < 0.05  # a 40 us chatter opening 20 ms after some makes
    t_parts += [t_on[chat] + 25 * MS, t_on[chat] + 25 * MS + 40_000]
    c_parts += [ch[chat], ch[chat]]
    l_parts += [np.zeros(chat.sum(), np.uint8), np.ones(chat.sum(), np.uint8)]
    t = np.concatenate(t_parts)
    order = np.argsort(t, kind="stable")
    edges = TimedEdges(t[order], np.concatenate(c_parts)[order], np.concatenate(l_parts)[order])
    dt = np.concatenate([t_on, t_off])
    dorder = np.argsort(dt, kind="stable")
    drives = TimedDrives(
        dt[dorder],
        np.concatenate([ch, ch])[dorder],
        np.concatenate([np.ones(k, np.uint8), np.zeros(k, np.uint8)])[dorder],
    )
    return edges, drives


def run(total_edges: int, chunk_edges: int, channels: int = 8, track_memory: bool = False):
    rng = np.random.default_rng(11)
    per_cycle = 2 * (MAX_B + 1) + 0.1  # mean edges per cycle and channel
    cycles_per_chunk = max(1, int(chunk_edges / (per_cycle * channels)))
    an = Analyzer(AnalysisSettings(settle_ns=5 * MS, lateness_ns=0))
    busy = 0.0
    edges_in = actuations = 0
    peaks: list[int] = []
    cycle = 0
    if track_memory:
        tracemalloc.start()
    while edges_in < total_edges:
        edges, drives = chunk_stream(cycle, cycles_per_chunk, channels, rng)
        cycle += cycles_per_chunk
        t0 = time.perf_counter()
        rows = an.push(edges, drives)
        busy += time.perf_counter() - t0
        edges_in += len(edges)
        actuations += len(rows)
        del edges, drives, rows
        if track_memory:
            peaks.append(tracemalloc.get_traced_memory()[1])
            tracemalloc.reset_peak()
    t0 = time.perf_counter()
    actuations += len(an.flush())
    busy += time.perf_counter() - t0
    if track_memory:
        tracemalloc.stop()
    expected = 2 * cycle * channels
    if actuations != expected:
        raise SystemExit(f"{actuations} actuations for {expected} drives: the figure would mean nothing")
    return edges_in, busy, peaks


def link_software_rate(n_edges: int) -> float | None:
    """Decoder + Timeline on the same kind of edges as packed bytes (the host side of the link path)."""
    try:
        from benchlog.clock import Timeline
        from benchlog.wire import Announce, Beat, Decoder, Drive, Edges, PackedEncoder
    except ImportError:
        return None
    rng = np.random.default_rng(5)
    edges, drives = chunk_stream(0, max(1, n_edges // (15 * 8)), 8, rng)
    ticks = (edges.t_ns // 1000).astype(np.uint64) & np.uint64(0xFFFFFFFF)
    records: list = [Announce(1, 1_000_000, 32, 8, "BENCH-RATE")]
    for s in range(0, len(ticks), 1000):
        e = min(len(ticks), s + 1000)
        records.append(Edges(edges.channel[s:e], edges.level[s:e], ticks[s:e]))
        records.append(Beat(int(ticks[e - 1]), e, 0))
    records += [
        Drive(int(c), int(v), int(t // 1000) & 0xFFFFFFFF)
        for t, c, v in zip(drives.t_ns[:10], drives.channel[:10], drives.level[:10], strict=True)
    ]
    data = PackedEncoder(max_edges=32).encode_all(records)
    dec, tl = Decoder(), Timeline()
    t0 = time.perf_counter()
    got = 0
    step = 65536
    for i in range(0, len(data), step):
        timed = tl.push(dec.feed(data[i : i + step]), host_ns=(i // step) * 10_000_000)
        got += len(timed.edges)
    elapsed = time.perf_counter() - t0
    return got / elapsed if got else None


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--edges", type=int, default=6_000_000)
    ap.add_argument("--chunk", type=int, default=200_000, help="edges per push() call")
    args = ap.parse_args()

    n, busy, _ = run(args.edges, args.chunk)
    rate = n / busy
    print(f"{n:,} edges on 8 channels, pushed in chunks of ~{args.chunk:,} edges, one core")
    print(
        f"{'segment + measure':<28} {rate:>14,.0f} edges/s   target {TARGET:>11,}  "
        f"{'ok' if rate >= TARGET else 'BELOW TARGET'}"
    )
    print(
        f"{'link end-to-end target':<28} {LINK_END_TO_END_TARGET:>14,} edges/s   (the issue's figure; "
        f"ratio {rate / LINK_END_TO_END_TARGET:.1f}x)"
    )
    link = link_software_rate(min(args.edges, 2_000_000))
    if link:
        print(
            f"{'decode + timeline, measured':<28} {link:>14,.0f} edges/s   (same run; analysis is "
            f"{rate / link:.1f}x this)"
        )
    # memory: a short and a 10x longer stream, same chunk: the peak per chunk must not grow with the run
    short = max(args.chunk * 5, args.edges // 20)
    _, _, p_short = run(short, args.chunk, track_memory=True)
    _, _, p_long = run(short * 10, args.chunk, track_memory=True)
    a, b = max(p_short) / 2**20, max(p_long) / 2**20
    flat = b <= a * 1.25
    print(f"{'peak memory, ' + format(short, ',') + ' edges':<28} {a:>11.1f} MiB")
    print(
        f"{'peak memory, ' + format(short * 10, ',') + ' edges':<28} {b:>11.1f} MiB   "
        f"{'flat (ok)' if flat else 'GROWS WITH THE RUN'}"
    )


if __name__ == "__main__":
    main()
