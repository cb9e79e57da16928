"""`benchlog analyze FILE`: measure a recorded sampler stream and summarise each channel."""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from benchlog.views.cli._args import JSON_HELP, positive

NAME = "analyze"
HELP = "Measure every make and break in a recorded sampler stream and summarise each channel."

EPILOG = """\
FILE holds bytes as a port delivered them (either wire form, told apart by itself) or line-form text.
A recording carries no host times: beats pace the replay. With --spec the spec's settle window and
chatter threshold are used and each channel gets a verdict; --settings and the options below override.
Exit status: 0 measured (whatever the verdicts), 1 a channel failed its spec (with --strict).
"""

# A file has no latency to keep: it is read, decoded, timed and measured in large batches (reads of this
# size, the analyzer's batches at least ANALYZE_BATCH edges), so the fixed cost per batch vanishes and
# nothing per edge or per actuation is kept for the whole file. Reads of 768 KiB against 1 MiB: the same
# CPU time on the line form, 2 % less on the packed form (its decoded frames stay in cache), 4-6 MB less
# peak memory (1 M edge captures, medians of 21).
READ_CHUNK = 3 << 18
ANALYZE_BATCH = 1 << 18


def _channels(text: str) -> frozenset[int]:
    try:
        return frozenset(int(c) for c in text.split(",") if c.strip())
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected channel numbers like 2,3, got {text!r}") from None


def _pair(text: str) -> tuple[int, int]:
    try:
        a, b = text.split(":")
        return int(a), int(b)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected NO:NC channel numbers like 0:1, got {text!r}") from None


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.formatter_class = argparse.RawDescriptionHelpFormatter
    p.epilog = EPILOG
    p.add_argument("file", metavar="FILE", help="recorded sampler bytes or line-form text ('-' for stdin)")
    p.add_argument("--spec", metavar="SPEC", help="part spec TOML, or a shipped part number (e.g. AG-MS5)")
    p.add_argument("--settings", metavar="TOML", help="analysis settings file (docs/metrics.md)")
    p.add_argument("--settle-ms", type=positive, help="settle window (default 10 ms, or the spec's)")
    p.add_argument("--chatter-us", type=positive, help="chatter threshold (default 10 us, or the spec's)")
    p.add_argument("--normally-closed", type=_channels, metavar="CH,..", help="normally-closed channels")
    p.add_argument("--changeover", type=_pair, action="append", metavar="NO:NC", help="a form C pair")
    p.add_argument("--free", action="store_true", help="ignore drive records: every channel free-running")
    p.add_argument("--tick-hz", type=int, help="sampler clock if the stream has no announcement")
    p.add_argument("--counter-bits", type=int, help="counter width if the stream has no announcement")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.add_argument("--strict", action="store_true", help="exit 1 when a channel fails its spec")


def _settings(args: argparse.Namespace, spec: Any):
    from benchlog.analysis import AnalysisSettings, load_settings

    s = spec.settings() if spec is not None else AnalysisSettings()
    if args.settings:
        s = load_settings(args.settings, s)
    changes: dict[str, Any] = {}
    if args.settle_ms:
        changes["settle_ns"] = round(args.settle_ms * 1e6)
    if args.chatter_us:
        changes["chatter_threshold_ns"] = round(args.chatter_us * 1e3)
    if args.normally_closed:
        changes["normally_closed"] = args.normally_closed
    if args.changeover:
        changes["form_c"] = tuple(args.changeover)
    if args.free:
        changes["mode"] = "free"
    return s.with_(**changes) if changes else s


# glibc's malloc hands freed memory back to the system (a heap top over its trim threshold is cut; a
# block over its mmap threshold is unmapped) and faults it in again on the next batch: the same arrays
# every batch, paid in page faults (a fifth of the CPU time of a 10 M edge packed capture). The streaming
# loop's working set is bounded, so keeping it costs no more peak memory.
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
KEEP_FREED_BYTES = 256 << 20
MMAP_ABOVE_BYTES = 32 << 20  # glibc's own ceiling for its adaptive mmap threshold


def reuse_freed_memory() -> bool:
    """Ask the C allocator to keep freed memory for the next batch instead of returning it to the
    system and faulting it back in (glibc's `mallopt`); True when it took the settings. Elsewhere (another
    C library, another system) nothing changes."""
    if not sys.platform.startswith("linux"):
        return False
    try:
        import ctypes

        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError):
        return False
    mallopt.argtypes = (ctypes.c_int, ctypes.c_int)
    return bool(mallopt(_M_MMAP_THRESHOLD, MMAP_ABOVE_BYTES)) and bool(
        mallopt(_M_TRIM_THRESHOLD, KEEP_FREED_BYTES)
    )


def freeze_loaded_modules() -> None:
    """Load the stages measuring needs and move every object there is now (modules, their classes and
    functions: they live until the process ends) out of the cyclic garbage collector's reach
    (`gc.freeze`), so its collections during the run and at exit do not walk them again and again
    (about 10 ms of a run's CPU time). The collector pauses while they load (numpy among them): what
    an import makes is not garbage."""
    import gc

    enabled = gc.isenabled()
    gc.disable()
    try:
        import benchlog.analysis
        import benchlog.clock
        import benchlog.clock._replay
        import benchlog.wire  # noqa: F401
    finally:
        gc.freeze()
        if enabled:
            gc.enable()


def _read_chunks(path: str, size: int = READ_CHUNK):
    from benchlog.errors import ConfigError

    try:
        fh = sys.stdin.buffer if path == "-" else open(path, "rb")  # noqa: SIM115
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read ({exc.strerror or exc})") from exc
    with fh:
        while True:
            try:
                chunk = fh.read(size)
            except OSError as exc:
                raise ConfigError(f"{path}: read failed ({exc.strerror or exc})") from exc
            if not chunk:
                return
            yield chunk


def analyze_file(
    path: str,
    settings,
    spec=None,
    tick_hz=None,
    counter_bits=None,
    *,
    read_bytes: int = READ_CHUNK,
    batch_edges: int = ANALYZE_BATCH,
    rows=None,
) -> dict[str, Any]:
    """Decode, time and measure a recording; returns the summary document `--json` prints.

    The file is streamed: each read is decoded into blocks of records, placed in run time paced by the
    sampler's beats (`Timeline.replay`), measured once `batch_edges` edges have gathered, and the
    actuations go into per-channel summaries (`Summaries`) and are dropped. `rows`, when given, is
    called with each batch of actuations (tests compare them across read and batch sizes)."""
    from benchlog.analysis import Analyzer, Summaries
    from benchlog.clock import Timeline
    from benchlog.errors import DataError
    from benchlog.events import TimedDrives, TimedEdges
    from benchlog.wire import Decoder

    decoder = Decoder()
    timeline = Timeline(tick_hz, counter_bits)
    analyzer: Analyzer | None = None
    summaries = Summaries(spec)
    incidents = []
    pending: list = []  # Timed results not yet given to the analyzer
    pending_edges = 0

    def measured(table) -> None:
        if len(table):
            summaries.add(table)
            if rows is not None:
                rows(table)

    def drain() -> None:
        nonlocal pending_edges
        if analyzer is None or not pending:
            return
        import numpy as np

        edges = TimedEdges.concat([p.edges for p in pending])
        drives = TimedDrives(
            *(np.concatenate([getattr(p.drives, f) for p in pending]) for f in ("t_ns", "channel", "level"))
        )
        incs = [i for p in pending for i in p.incidents]
        pending.clear()
        pending_edges = 0
        measured(analyzer.push(edges, drives, incs))

    def take(timed) -> None:
        nonlocal analyzer, pending_edges
        if analyzer is None and timeline.clock_hz:
            res = max(1, 1_000_000_000 // int(timeline.clock_hz))
            analyzer = Analyzer(settings.with_(resolution_ns=max(settings.resolution_ns, res)), spec)
            # the summaries take rows in any order across channels: no sort unless rows are asked for
            analyzer.ordered = rows is not None
        incidents.extend(timed.incidents)
        if analyzer is not None:
            pending.append(timed)
            pending_edges += len(timed.edges)
            if pending_edges >= batch_edges:
                drain()

    for chunk in _read_chunks(path, read_bytes):
        take(timeline.replay(decoder.feed(chunk, blocks=True)))
    take(timeline.replay_end())
    if analyzer is None:
        if decoder.counters.records == 0:
            raise DataError(f"{path}: no sampler records found ({decoder.counters.faults} decode faults)")
        raise DataError(f"{path}: no announcement in the stream: give --tick-hz and --counter-bits")
    drain()
    measured(analyzer.flush(until_ns=timeline.run_ns + 1))  # beats tell how long the data ran
    c = decoder.counters
    return {
        "file": path,
        "part": spec.number if spec is not None else None,
        "announcement": None if timeline.announcement is None else vars_of(timeline.announcement),
        "decode": {"bytes": c.bytes_in, "records": c.records, "edges": c.edges, "faults": c.faults},
        "incidents": [
            {"kind": i.kind, "t_start_ns": i.t_start_ns, "t_end_ns": i.t_end_ns, "detail": i.detail}
            for i in incidents
        ],
        "settings": {
            "settle_ms": settings.settle_ns / 1e6,
            "chatter_threshold_us": settings.chatter_threshold_ns / 1e3,
            "glitch_floor_us": analyzer.settings.floor / 1e3,
        },
        "channels": summaries.result(),
    }


def vars_of(obj: Any) -> dict[str, Any]:
    return {k: getattr(obj, k) for k in obj.__slots__}


def _ms(d: dict[str, Any], key: str) -> str:
    v = d.get(key)
    return "-" if v is None else f"{v / 1000:.2f}"


def _triple(d: dict[str, Any]) -> str:
    return f"{_ms(d, 'p50')}/{_ms(d, 'p95')}/{_ms(d, 'max')}"


def print_table(doc: dict[str, Any], out=None) -> None:
    out = out or sys.stdout
    dec = doc["decode"]
    part = f"  part {doc['part']}" if doc["part"] else ""
    print(
        f"{doc['file']}: {dec['records']} records, {dec['edges']} edges, {dec['faults']} decode faults, "
        f"{len(doc['incidents'])} incidents{part}",
        file=out,
    )
    print("times in ms as p50/p95/max", file=out)
    head = (
        f"{'ch':>2} {'cycles':>7} {'makes':>6} {'breaks':>6} {'incompl':>7} {'missed':>6} {'stuck':>5} "
        f"{'make bounce':>17} {'break bounce':>17} {'operate':>17} {'release':>17} "
        f"{'chatter':>7} {'glitch':>6}"
    )
    has_verdict = any("verdict" in c for c in doc["channels"])
    print(head + ("  verdict" if has_verdict else ""), file=out)
    for c in doc["channels"]:
        line = (
            f"{c['channel']:>2} {c['cycles']:>7} {c['makes']:>6} {c['breaks']:>6} {c['incomplete']:>7} "
            f"{c['missed']:>6} {c['stuck']:>5} {_triple(c['make_bounce_us']):>17} "
            f"{_triple(c['break_bounce_us']):>17} {_triple(c['operate_us']):>17} "
            f"{_triple(c['release_us']):>17} "
            f"{c['chatter_events']:>7} {c['glitches']:>6}"
        )
        if has_verdict:
            line += f"  {c['verdict']}: {c['reason']}"
        print(line, file=out)


def run(args: argparse.Namespace) -> int:
    reuse_freed_memory()
    freeze_loaded_modules()
    spec = None
    if args.spec:
        from benchlog.analysis import load_spec

        spec = load_spec(args.spec)
    settings = _settings(args, spec)
    doc = analyze_file(args.file, settings, spec, args.tick_hz, args.counter_bits)
    if args.json:
        json.dump(doc, sys.stdout, indent=1, default=str)
        print()
    else:
        print_table(doc)
    if args.strict and any(c.get("verdict") == "fail" for c in doc["channels"]):
        return 1
    return 0
