"""`benchlog watch PORT`: print a sampler's edges and incidents live; Ctrl-C ends with totals."""

from __future__ import annotations

import argparse
import sys

from benchlog.views.cli._args import add_profile, positive

NAME = "watch"
HELP = "Print a sampler's decoded edges, drive switchings and incidents live (any pyserial URL)."


def _channels(text: str) -> list[int]:
    out: list[int] = []
    try:
        for part in text.split(","):
            lo, _, hi = part.partition("-")
            out += list(range(int(lo), int(hi or lo) + 1))
    except ValueError:
        raise argparse.ArgumentTypeError(f"channels like 0-7 or 0,2,5, got {text!r}") from None
    if not out or min(out) < 0 or max(out) > 15:
        raise argparse.ArgumentTypeError(f"channels must be 0-15, got {text!r}")
    return sorted(set(out))


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "port",
        nargs="?",
        metavar="PORT",
        help="device path, pty path, socket://HOST:PORT or rfc2217://HOST:PORT",
    )
    p.add_argument("--list", action="store_true", help="list this machine's serial ports and exit")
    p.add_argument("--summary", action="store_true", help="one line per second instead of one per edge")
    add_profile(p, "send a cycle profile (CYCLES 0 = until stopped) and start it")
    p.add_argument(
        "--on",
        type=_channels,
        metavar="CHANNELS",
        help="channels the profile runs on (default: every announced channel)",
    )
    p.add_argument("--form", choices=("line", "packed"), help="ask the sampler for this record form")
    p.add_argument("--for", dest="duration", type=positive, metavar="SECONDS", help="stop after this long")
    p.add_argument(
        "--wait",
        type=float,
        default=0.0,
        metavar="SECONDS",
        help="keep trying to open the port this long (default: fail at once)",
    )
    p.add_argument(
        "--speed",
        type=positive,
        default=1.0,
        help="the sampler runs N times real time (a simulator started with --speed N)",
    )
    p.add_argument("--baud", type=int, default=115200, help="baud rate (ignored by USB and pty ports)")
    p.add_argument(
        "--leave-running", action="store_true", help="do not stop a profile this command started when it ends"
    )


def _edge_lines(timed, drives: bool = True) -> list[str]:
    import numpy as np

    e, d = timed.edges, timed.drives
    t = np.concatenate([e.t_ns, d.t_ns])
    ch = np.concatenate([e.channel, d.channel]).tolist()
    lv = np.concatenate([e.level, d.level]).tolist()
    is_drive = [False] * len(e) + [True] * len(d)
    order = np.argsort(t, kind="stable").tolist()
    ts = (t / 1e9).tolist()
    words = {(False, 1): "closed", (False, 0): "open", (True, 1): "drive on", (True, 0): "drive off"}
    return [f"{ts[i]:14.6f}  ch{ch[i]:<2}  {words[(is_drive[i], lv[i])]}" for i in order]


def _incident_line(inc) -> str:
    lost = f", {inc.edges_lost} edges lost" if inc.edges_lost else ""
    return f"{inc.t_start_ns / 1e9:14.6f}  ! {inc.kind}: {inc.detail}{lost}"


def run(args: argparse.Namespace) -> int:
    import time

    from benchlog.errors import PortError, UsageError
    from benchlog.ingest import Feed
    from benchlog.link import list_ports
    from benchlog.wire import Halt, Plan, SetForm

    if args.list:
        ports = list_ports()
        for p in ports:
            print(f"{p.device}\t{p.description}\t{p.hwid}")
        if not ports:
            print("no serial ports found", file=sys.stderr)
        return 0
    if not args.port:
        raise UsageError("watch needs a PORT (or --list)")

    out = sys.stdout
    started = False
    t0 = time.monotonic()
    with Feed(args.port, speed=args.speed, wait_s=args.wait, baudrate=args.baud) as feed:
        print(f"# watching {args.port} (Ctrl-C to stop)", file=out, flush=True)
        pending_cycle = args.profile is not None
        if args.form:
            feed.send(SetForm("L" if args.form == "line" else "P"))
        sec_edges = sec_drives = 0
        sec_inc: list[str] = []
        last_summary = time.monotonic()
        try:
            while args.duration is None or time.monotonic() - t0 < args.duration:
                timed = feed.poll(0.1)
                if pending_cycle and feed.timeline.announcement is not None:
                    ann = feed.timeline.announcement
                    channels = args.on or list(range(ann.channels))
                    on_ms, off_ms, cycles = args.profile.on_ms, args.profile.off_ms, args.profile.cycles
                    plans = [
                        Plan(ch, round(on_ms * 1000), round(off_ms * 1000), int(cycles)) for ch in channels
                    ]
                    feed.start_cycling(plans)
                    started, pending_cycle = True, False
                    print(
                        f"# cycling channels {channels}: {on_ms:g} ms on, {off_ms:g} ms off, "
                        f"{int(cycles) or 'no limit'} cycles",
                        file=out,
                        flush=True,
                    )
                for ann in timed.announcements:
                    print(
                        f"# sampler {ann.board_id}: protocol {ann.version}, {ann.clock_hz} Hz, "
                        f"{ann.counter_bits}-bit counter, {ann.channels} channels",
                        file=out,
                        flush=True,
                    )
                if args.summary:
                    sec_edges += len(timed.edges)
                    sec_drives += len(timed.drives)
                    sec_inc += [i.kind for i in timed.incidents]
                    if time.monotonic() - last_summary >= 1.0:
                        c = feed.counters
                        run_s = feed.timeline.run_ns / 1e9
                        inc = f", incidents {', '.join(sec_inc)}" if sec_inc else ""
                        print(
                            f"{run_s:14.3f}  {sec_edges} edges, {sec_drives} drives this second; "
                            f"total {c.edges} edges, {c.edges_lost} lost{inc}",
                            file=out,
                            flush=True,
                        )
                        sec_edges = sec_drives = 0
                        sec_inc = []
                        last_summary = time.monotonic()
                    for inc in timed.incidents:
                        print(_incident_line(inc), file=out)
                else:
                    lines = _edge_lines(timed)
                    lines += [_incident_line(i) for i in timed.incidents]
                    if lines:
                        out.write("\n".join(lines) + "\n")
                        out.flush()
        except KeyboardInterrupt:
            pass
        if started and not args.leave_running:
            try:
                feed.send(Halt())
            except PortError:
                pass
        tail = feed.poll(0.05)
        for inc in tail.incidents:
            print(_incident_line(inc), file=out)
        c = feed.counters
    ppm = f"{c.clock_error_ppm:+.1f} ppm" if c.clock_error_ppm is not None else "not yet known"
    kinds = ", ".join(f"{k} {n}" for k, n in sorted(c.incidents.items())) or "none"
    print(
        f"# totals: {c.bytes_in} bytes, {c.edges} edges, {c.drives} drive switchings, {c.beats} beats; "
        f"{c.decode_faults} decode faults, {c.edges_lost} edges reported lost, {c.outages} outages, "
        f"{c.resets} sampler resets; incidents: {kinds}; sampler clock {ppm}",
        file=out,
        flush=True,
    )
    return 0
