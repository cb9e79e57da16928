"""End-to-end throughput: simulated sampler -> pseudo-terminal -> pyserial -> decoder -> clock.

Run: python tests/benchmarks/bench_link.py [--edges N] [--speed S]

The simulator runs as its own process (`benchlog sim`, as a bench would), with a deliberately bouncy
load (preset bench-rate: 16 channels, ~40 edges per actuation); this process reads it with
`benchlog.ingest.Feed`, which sends the cycle profile once connected. Both forms are measured in the
same run. A rate counts only if nothing was lost: every edge the simulator reports it generated arrived,
and no incident reports a loss.

Beside each figure: the target (>= 1 M edges/s through the pty with no loss) and what a full-speed USB
serial link could carry at its ~1.2 MB/s bulk ceiling with the bytes per edge measured here (the issue's
rough figures: ~70 k edges/s line, ~240 k packed).
"""

from __future__ import annotations

import argparse
import os
import re
import signal
import subprocess
import sys
import tempfile
import time

from benchlog.ingest import Feed
from benchlog.wire import Plan

TARGET = 1_000_000
USB_FULL_SPEED_BYTES_S = 1.2e6
ISSUE_USB = {"line": 70_000, "packed": 240_000}
CHANNELS = 16
ON_US = OFF_US = 10_000


def measure(form: str, edges_wanted: int, speed: float) -> dict:
    cycles = max(1, edges_wanted // (CHANNELS * 80))
    with tempfile.TemporaryDirectory(prefix="benchlog-bench-") as tmp:
        link = os.path.join(tmp, "port")
        cmd = [sys.executable, "-m", "benchlog", "sim", "--preset", "bench-rate", "--form", form]
        cmd += ["--speed", str(speed), "--link", link, "--seed", "1"]
        proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, text=True, start_new_session=True)
        try:
            proc.stdout.readline()
            proc.stdout.readline()
            with Feed(link, speed=speed, wait_s=5.0) as feed:
                while feed.timeline.announcement is None:
                    feed.poll(0.05)
                feed.start_cycling([Plan(ch, ON_US, OFF_US, cycles) for ch in range(CHANNELS)])
                t0 = time.perf_counter()
                last = t0
                received = 0
                while True:
                    timed = feed.poll(0.1)
                    now = time.perf_counter()
                    if len(timed.edges):
                        received += len(timed.edges)
                        last = now
                    elif now - last > 1.0:
                        break
                counters = feed.counters
            os.killpg(proc.pid, signal.SIGINT)
            out, _ = proc.communicate(timeout=20)
        finally:
            if proc.poll() is None:
                proc.kill()
    m = re.search(r"# served .*?, (\d+) edges", out)
    generated = int(m.group(1)) if m else -1
    return {
        "form": form,
        "edges": received,
        "generated": generated,
        "seconds": last - t0,
        "rate": received / max(last - t0, 1e-9),
        "bytes_per_edge": counters.bytes_in / max(received, 1),
        "lost_reported": counters.edges_lost,
        "faults": counters.decode_faults,
    }


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--edges", type=int, default=3_000_000, help="edges per form (default 3 M)")
    ap.add_argument("--speed", type=float, default=100.0, help="simulator speed cap (default x100)")
    args = ap.parse_args()
    print(f"sim -> pty -> pyserial -> decoder -> clock, {args.edges:,} edges per form, one run")
    print(
        f"{'form':7} {'edges/s':>12} {'target':>10} {'ok':>4} {'B/edge':>7} {'USB FS ceiling':>15} "
        f"{'(issue)':>9}  loss"
    )
    for form in ("line", "packed"):
        r = measure(form, args.edges, args.speed)
        lossless = r["generated"] == r["edges"] and r["lost_reported"] == 0 and r["faults"] == 0
        ceiling = USB_FULL_SPEED_BYTES_S / r["bytes_per_edge"]
        ok = "yes" if lossless and r["rate"] >= TARGET else "NO"
        loss = (
            "none"
            if lossless
            else (
                f"{r['generated'] - r['edges']} of {r['generated']} missing, {r['lost_reported']} reported, "
                f"{r['faults']} decode faults"
            )
        )
        print(
            f"{form:7} {r['rate']:12,.0f} {TARGET:10,} {ok:>4} {r['bytes_per_edge']:7.2f} "
            f"{ceiling:15,.0f} {ISSUE_USB[form]:9,}  {loss}"
        )
        print(f"        ({r['edges']:,} edges in {r['seconds']:.2f} s)")
    print(f"load average while measuring: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
