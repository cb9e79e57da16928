"""`benchlog demo`: record a short accelerated simulated run of the demo scenario, then show it.

The demo scenario (invented): Brightwater Appliance Lab qualifies the door-interlock microswitch of a
commercial dishwasher, incumbent Ashgrove AG-MS5 against candidate Vellmar VS-505, eight units of each
on bench BW-BENCH-A; then bench BW-BENCH-B runs eight AG-R12 12 V signal relays on an open-ended
life test (stopped after as many cycles), and its cable is pulled for a moment so the dashboard has a
link outage to show.

Everything goes through the real path: the simulated sampler on a pseudo-terminal, pyserial, the wire
decoder and timeline (benchlog.ingest), the analysis and life judge (benchlog.recorder), the store.
The simulated populations are aged faster than real parts (life scale divided and wear multiplied by
the same factor) so a few thousand cycles show the wear, drift and failures of a long test.
"""

from __future__ import annotations

import argparse
import sys
import threading
import time
from dataclasses import dataclass, field, replace
from pathlib import Path

NAME = "demo"
HELP = "Record a short simulated run of the demo scenario into a fresh database and open the dashboard."

SPEED = 300.0  # sampler time runs this many times the wall clock
ON_MS = OFF_MS = 50.0
AGED_LIFE_CYCLES = 200_000  # the run's cycles stand for this many cycles of a real life test ...
MAX_AGEING = 100.0  # ... but parts age at most this many times faster than real ones
PULL_FOR_S = 0.3  # bench B's cable is pulled a third of the way in for this many wall seconds
STALL_S = 8.0  # a bench whose cycle count does not move for this long is stopped


def _cycles(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number of cycles, got {text!r}") from None
    if not 200 <= value <= 200_000:
        raise argparse.ArgumentTypeError(f"must be between 200 and 200000 cycles, got {value}")
    return value


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--db",
        metavar="PATH",
        help="a new SQLite file to record into (default: where the other commands read: $BENCHLOG_DB, "
        "then ./benchlog.sqlite)",
    )
    p.add_argument(
        "--cycles", type=_cycles, default=3000, metavar="N", help="cycles on bench A (default 3000)"
    )
    p.add_argument(
        "--no-dash", action="store_true", help="print the summary instead of opening the dashboard"
    )
    p.add_argument("--seed", type=int, default=7, help="random seed of the simulated units (default 7)")


def _fresh_path(given: str | None) -> Path:
    import os

    from benchlog.errors import ConfigError
    from benchlog.store._engine import DEFAULT_FILE, ENV_VAR

    if not given:
        given = os.environ.get(ENV_VAR) or DEFAULT_FILE  # the store every other command reads
        if "://" in given:
            raise ConfigError(f"${ENV_VAR} names a database URL: the demo records into a new SQLite file")
    path = Path(given).expanduser()
    if path.exists():
        raise ConfigError(
            f"{path} exists: the demo records into a new database file (give --db NEW.sqlite, and the same "
            "--db to the other commands)"
        )
    if not path.parent.is_dir():
        raise ConfigError(f"cannot create {path}: folder {path.parent} does not exist")
    return path


def ageing(cycles: int) -> float:
    return min(MAX_AGEING, AGED_LIFE_CYCLES / cycles)


def aged(cfg, cycles: int):
    """The preset with every population aged `AGED_LIFE_CYCLES / cycles` (at most MAX_AGEING) times
    faster."""
    factor = ageing(cycles)
    pops = {
        name: replace(p, life_scale=p.life_scale / factor, wear_per_100k=p.wear_per_100k * factor)
        for name, p in cfg.populations.items()
    }
    return replace(cfg, populations=pops)


@dataclass
class BenchJob:
    """One bench of the demo recorded in its own thread."""

    name: str
    preset: str
    cycles: int  # the run's target (0: until stopped)
    seed: int
    lot: str
    stop_after: int = 0  # with no target: stop after this many cycles
    pull: bool = False
    run_id: int | None = None
    reason: str = ""
    stalled: bool = False
    error: BaseException | None = None
    done: threading.Event = field(default_factory=threading.Event)
    started: threading.Event = field(default_factory=threading.Event)


def record_bench(db: str, job: BenchJob, aged_for: int, stop: threading.Event) -> None:
    from benchlog.ingest import Feed
    from benchlog.recorder import Recorder, UnitAssignment, register_units
    from benchlog.sim import PtySampler, load_preset
    from benchlog.store import Store

    store = sim = feed = writer = None
    try:
        cfg = aged(load_preset(job.preset), aged_for)
        cfg = replace(cfg, autostart=None)  # the recorder sends the plan itself
        store = Store.open(db)
        units = [
            UnitAssignment(u.channel, u.serial, u.population, job.lot, cfg.populations[u.population].supplier)
            for u in cfg.units
        ]
        bench_id = store.register_bench(job.name)
        ids, specs = register_units(store, units, None, ageing=ageing(aged_for))
        sim = PtySampler(cfg, seed=job.seed, speed=SPEED, keep_truth=False)
        sim.unheard_s = 60.0  # the demo's own reader is never stuck: a busy machine only slows it down
        sim.start()
        feed = Feed(sim.path, speed=SPEED)
        feed.open()
        early = []
        t_end = time.monotonic() + 10
        while feed.timeline.announcement is None and time.monotonic() < t_end:
            early.append(feed.poll(0.1))
        ann = feed.timeline.announcement
        if ann is not None:
            store.update_bench(
                bench_id,
                board_id=ann.board_id,
                clock_hz=ann.clock_hz,
                counter_bits=ann.counter_bits,
                channels=ann.channels,
            )
        writer = store.start_run(
            bench_id,
            ids,
            profile={"on_ms": ON_MS, "off_ms": OFF_MS, "cycles": job.cycles},
            target_cycles=job.cycles,
            note=f"benchlog demo: simulated at x{SPEED:g}, parts aged x{ageing(aged_for):.0f}",
            protocol_version=getattr(ann, "version", None),
            board_id=getattr(ann, "board_id", None),
            clock_hz=getattr(ann, "clock_hz", None),
        )
        job.run_id = writer.run_id
        job.started.set()
        first = next((sp for sp in specs.values() if sp is not None), None)
        rec = Recorder(writer, settings=first.settings() if first else None, specs=specs)
        for timed in early:
            rec.push(timed)
        feed.start_cycling(rec.plans(int(ON_MS * 1000), int(OFF_MS * 1000)))

        pulled: list[float] = []  # monotonic time of the pull
        moved = [time.monotonic(), -1]  # when the cycle count last moved, and to what

        def progress(p) -> None:
            now = time.monotonic()
            target = job.stop_after or job.cycles
            if job.pull and not pulled and p.cycles_done >= target // 3:
                pulled.append(now)
                sim.pull_cable(PULL_FOR_S, hold=True)  # the link goes down and comes back
            back = not job.pull or (pulled and now - pulled[0] > PULL_FOR_S + 1.0)
            if job.stop_after and p.cycles_done >= job.stop_after and back:
                stop.set()
            if p.cycles_done != moved[1]:
                moved[:] = [now, p.cycles_done]
            elif now - moved[0] > STALL_S:  # a demo never waits for ever on a bench that went quiet
                job.stalled = True
                stop.set()

        job.reason = rec.run(
            feed,
            stop,
            on_progress=progress,
            progress_every_s=0.05,
            grace_s=max(0.3, 2 * (ON_MS + OFF_MS) / 1000 / SPEED),
        )
    except BaseException as exc:  # noqa: BLE001 - reported by the caller in one line
        job.error = exc
        if writer is not None and not writer.closed:
            writer.abandon()
    finally:
        job.started.set()
        if feed is not None:
            feed.close()
        if sim is not None:
            sim.stop()
        if store is not None:
            store.close()
        job.done.set()


def start_demo(db: str, cycles: int, seed: int) -> tuple[list[BenchJob], threading.Event, threading.Thread]:
    """Record bench A, then bench B, in a thread (one after the other: both at once would only share
    the interpreter); `stop` ends the recording early."""
    a = BenchJob("BW-BENCH-A", "demo", cycles, seed, "L1")
    # bench B runs as many cycles as bench A: a run with a target ends at the same cycle every time
    b = BenchJob("BW-BENCH-B", "relay-night", cycles, seed + 1, "N1", pull=True)
    stop = threading.Event()

    def both() -> None:
        record_bench(db, a, cycles, stop)
        if not stop.is_set() and a.error is None:
            record_bench(db, b, cycles, stop)

    thread = threading.Thread(target=both, name="demo-recording", daemon=True)
    thread.start()
    a.started.wait(30)  # the database exists before anyone reads it
    return [a, b], stop, thread


def _stalls(jobs: list[BenchJob]) -> None:
    for job in jobs:
        if job.stalled:
            print(
                f"note: bench {job.name} delivered no cycles for {STALL_S:g} s"
                + (" after its cable was pulled" if job.pull else "")
                + "; its recording was stopped there"
            )


def _check(jobs: list[BenchJob]) -> None:
    from benchlog.errors import BenchlogError, StoreError

    for job in jobs:
        if job.error is not None:
            if isinstance(job.error, BenchlogError):
                raise job.error
            raise StoreError(f"the demo's bench {job.name} stopped: {type(job.error).__name__}: {job.error}")


def _finish(thread: threading.Thread) -> None:
    """Wait for the recording thread to end its runs (no deadline: a run cut off by a timer would be
    left without its end)."""
    while thread.is_alive():
        thread.join(0.2)


def run(args: argparse.Namespace) -> int:
    from benchlog.views.cli._signals import stop_signals

    path = _fresh_path(args.db)
    db = str(path.resolve())
    print(
        f"benchlog demo: recording into {path} (simulated benches at x{SPEED:g})", file=sys.stderr, flush=True
    )
    t0 = time.monotonic()
    jobs, stop, thread = start_demo(db, args.cycles, args.seed)
    if args.no_dash or not sys.stdout.isatty():
        # Ctrl-C, SIGTERM or SIGHUP: the recording ends its run as "stopped" however long that takes
        # on a loaded machine; a second signal stops at once
        with stop_signals(stop):
            _finish(thread)
        _check(jobs)
        from benchlog.store import Store
        from benchlog.views.tui._summary import summary_text

        with Store.open(db, readonly=True) as store:
            print(summary_text(store))
        _stalls(jobs)
        print(f"recorded in {time.monotonic() - t0:.1f} s; look again with: benchlog dash --db {path}")
        return 0
    from benchlog.views.tui import BenchDashboard

    try:
        BenchDashboard(db, refresh_s=1.0, quit_on_signals=True).run()
    finally:
        stop.set()
        with stop_signals(stop):
            _finish(thread)
    _check(jobs)
    _stalls(jobs)
    print(f"demo database: {path} (open it again with: benchlog dash --db {path})")
    return 0
