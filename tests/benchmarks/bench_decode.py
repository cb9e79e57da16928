"""Decode speed of each wire form, beside its target and beside what a full-speed USB link can carry.

    python tests/benchmarks/bench_decode.py [--edges N] [--chunk BYTES]

The stream is a bench's: edges on 8 channels with bounce-like spacing, a beat after every 1,000 edges,
packed frames of 32 edges (the reference firmware's flush size). It is fed to one Decoder in chunks as a
serial reader would hand them over, on one core, and the decoded ticks are checked against the input so
the figure measures real work. Targets: packed >= 5 M edges/s, line >= 2 M edges/s. A full-speed USB
serial link moves about 1.2 MB/s in bulk: about 70 k edges/s as 17-byte lines, 240 k edges/s packed.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from benchlog.clock import Timeline
from benchlog.wire import Announce, Beat, Decoder, Drive, Edges, LineEncoder, PackedEncoder

TARGETS = {"packed": 5_000_000, "line": 2_000_000}
USB_CEILING = {"packed": 240_000, "line": 70_000}


def make_records(n: int) -> tuple[list, np.ndarray]:
    rng = np.random.default_rng(2024)
    tick = (np.cumsum(rng.integers(3, 4000, n)) & 0xFFFFFFFF).astype(np.uint64)
    channel = rng.integers(0, 8, n).astype(np.uint8)
    level = rng.integers(0, 2, n).astype(np.uint8)
    records: list = [Announce(1, 1_000_000, 32, 8, "BENCH-1")]
    for s in range(0, n, 1000):
        e = min(n, s + 1000)
        records.append(Edges(channel[s:e], level[s:e], tick[s:e]))
        records.append(Beat(int(tick[e - 1]), e, 0))
    return records, tick


def make_cycling(n: int) -> tuple[list, int]:
    """A cycling bench's mix: a drive record before every 8 bounce edges, a beat every 100 cycles."""
    rng = np.random.default_rng(7)
    cycles = n // 8
    gaps = rng.integers(5, 300, (cycles, 8))
    tick = np.cumsum(
        gaps.ravel() + np.repeat(np.r_[0, np.full(cycles - 1, 5000)], 8) * (np.arange(8 * cycles) % 8 == 0)
    )
    tick = (tick & 0xFFFFFFFF).astype(np.uint64).reshape(cycles, 8)
    channel = np.repeat((np.arange(cycles) % 8).astype(np.uint8), 8).reshape(cycles, 8)
    level = np.tile((np.arange(8) % 2).astype(np.uint8), (cycles, 1))
    records: list = [Announce(1, 1_000_000, 32, 8, "BENCH-1")]
    for c in range(cycles):
        records.append(Drive(int(channel[c, 0]), c % 2, int(tick[c, 0]) - 100 & 0xFFFFFFFF))
        records.append(Edges(channel[c], level[c], tick[c]))
        if c % 100 == 99:
            records.append(Beat(int(tick[c, -1]), 8 * (c + 1), 0))
    return records, 8 * cycles


def decode_and_place(data: bytes, chunk: int, n_edges: int) -> tuple[float, float]:
    """(decode only, decode + clock stage) edges/s; host times advance as fast as the data needs."""
    dec = Decoder()
    t0 = time.perf_counter()
    outs = [dec.feed(data[i : i + chunk]) for i in range(0, len(data), chunk)]
    t1 = time.perf_counter()
    timeline = Timeline(time_scale=1e6)  # sampler time runs far faster than this loop's host time
    placed = sum(len(timeline.push(o, 10**9 + k * 10**6).edges) for k, o in enumerate(outs))
    t2 = time.perf_counter()
    if placed != n_edges or dec.counters.faults:
        raise SystemExit("edges lost in the cycling stream: the figure would mean nothing")
    return n_edges / (t1 - t0), n_edges / (t2 - t0)


def measure(data: bytes, chunk: int, expected: np.ndarray, repeats: int = 3) -> float:
    best = float("inf")
    for _ in range(repeats):
        dec = Decoder()
        got = []
        t0 = time.perf_counter()
        for i in range(0, len(data), chunk):
            got += dec.feed(data[i : i + chunk])
        best = min(best, time.perf_counter() - t0)
    ticks = np.concatenate([r.tick for r in got if isinstance(r, Edges)])
    if not np.array_equal(ticks, expected) or dec.counters.faults:
        raise SystemExit("decoded edges differ from the encoded ones: the figure would mean nothing")
    return len(expected) / best


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--edges", type=int, default=2_000_000)
    ap.add_argument("--chunk", type=int, default=65536, help="bytes per feed() call")
    args = ap.parse_args()
    records, tick = make_records(args.edges)
    streams = {
        "packed": PackedEncoder(max_edges=32).encode_all(records),
        "line": LineEncoder().encode_all(records),
    }
    print(f"{args.edges:,} edges, fed in {args.chunk:,}-byte chunks, one core")
    print(
        f"{'form':<7} {'bytes/edge':>10} {'decode edges/s':>15} {'target':>11} "
        f"{'USB FS ceiling':>15} {'x ceiling':>10}"
    )
    for form, data in streams.items():
        rate = measure(data, args.chunk, tick)
        verdict = "ok" if rate >= TARGETS[form] else "BELOW TARGET"
        print(
            f"{form:<7} {len(data) / args.edges:>10.2f} {rate:>15,.0f} {TARGETS[form]:>11,} "
            f"{USB_CEILING[form]:>15,} {rate / USB_CEILING[form]:>9.0f}x  {verdict}"
        )
    # a cycling bench's mix and the clock stage behind the decoder (no targets in the issue)
    cycling, n_cycling = make_cycling(args.edges // 2)
    for form, enc in (("packed", PackedEncoder(max_edges=32)), ("line", LineEncoder())):
        dec_rate, both = decode_and_place(enc.encode_all(cycling), args.chunk, n_cycling)
        print(
            f"{form:<7} drive every 8 edges: decode {dec_rate:>12,.0f} edges/s, decode + clock {both:>12,.0f}"
        )
    # encoding, for the simulator's sake (no target in the issue)
    for name, make in (("packed", lambda: PackedEncoder(max_edges=32)), ("line", LineEncoder)):
        t0 = time.perf_counter()
        make().encode_all(records)
        print(f"encode {name:<7} {args.edges / (time.perf_counter() - t0):>15,.0f} edges/s")


if __name__ == "__main__":
    main()
