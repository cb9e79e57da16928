"""`benchlog record`: cycle a bench's units and record every actuation into the store."""

from __future__ import annotations

import argparse
import sys

from benchlog.views.cli._args import add_profile

NAME = "record"
HELP = "Cycle the units on a sampler bench and record every make and break into the database."


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "port", nargs="?", metavar="PORT", help="a device, pty path, pyserial URL, or a capture file"
    )
    p.add_argument("--sim", metavar="PRESET", help="start the simulated sampler (a preset or TOML file)")
    p.add_argument("--bench", help="bench name (registered on first use)")
    add_profile(p, "cycle profile, e.g. 50:50:200000 (CYCLES 0 = until stopped)")
    p.add_argument(
        "--units",
        nargs="+",
        metavar="CH=UNIT",
        help="units by channel: CH=SERIAL (with --part/--lot) or CH=PART/LOT/SERIAL",
    )
    p.add_argument("--part", help="part number for units given as CH=SERIAL")
    p.add_argument("--supplier", default="", help="supplier of --part")
    p.add_argument("--lot", help="lot code for units given as CH=SERIAL")
    p.add_argument("--spec", help="part spec TOML (default: the shipped spec of the part number, if any)")
    p.add_argument("--db", help="database URL or SQLite file (default: $BENCHLOG_DB or ./benchlog.sqlite)")
    p.add_argument("--resume", type=int, metavar="RUN", help="continue an interrupted run on the same units")
    p.add_argument(
        "--fail-after",
        type=int,
        default=5,
        metavar="N",
        help="a unit fails after N consecutive cycles showing the same failure (default 5)",
    )
    p.add_argument(
        "--window", type=int, default=100, metavar="CYCLES", help="cycles per trend window (default 100)"
    )
    p.add_argument("--note", default="", help="a note kept with the run")
    p.add_argument("--quiet", action="store_true", help="no progress line")
    e = p.add_argument_group("events (docs/commands.md, 'Events of a recording')")
    e.add_argument(
        "--on-event",
        metavar="CMD",
        help="run CMD on each event (a unit failed, a unit's first actuation out of spec, a unit's first"
        " drift flag, the link lost, the run ended): the event as JSON on its standard input and BENCHLOG_*"
        " variables; CMD is split"
        " into words as a shell would, and run without a shell",
    )
    e.add_argument(
        "--event-timeout-s",
        type=float,
        default=10.0,
        metavar="SECONDS",
        help="kill a call of the --on-event command after this long (default 10)",
    )
    e.add_argument(
        "--event-after-s",
        type=float,
        default=30.0,
        metavar="SECONDS",
        help="the link counts as lost once down this long (default 30)",
    )
    g = p.add_argument_group("simulated sampler")
    g.add_argument("--sim-speed", type=float, default=1.0, help="sampler time runs N times the wall clock")
    g.add_argument("--sim-seed", type=int, default=0, help="random seed of the simulated units")
    g.add_argument("--sim-pull-at", type=float, metavar="SECONDS", help="pull the cable at this sampler time")
    g.add_argument("--sim-pull-for", type=float, metavar="SECONDS", help="wall seconds the cable stays out")


def run(args: argparse.Namespace) -> int:
    import threading

    from benchlog.errors import StoreError, UsageError
    from benchlog.views.cli._signals import stop_signals

    if not args.port and not args.sim:
        raise UsageError("give the sampler's PORT, or --sim PRESET for the simulated sampler")
    if args.port and args.sim:
        raise UsageError("give either PORT or --sim, not both")
    if args.fail_after < 1:
        raise UsageError("--fail-after must be at least 1")
    if args.window < 1:
        raise UsageError("--window must be at least 1 cycle")
    if not args.sim_speed > 0:
        raise UsageError("--sim-speed must be > 0")
    event_argv = _event_argv(args)

    sim_cfg = _sim_config(args) if args.sim else None
    store = _open_existing(args.db)  # a new SQLite file is made only once the sampler is heard
    stop = threading.Event()
    session = _Session(args, store, sim_cfg, event_argv)
    try:
        with stop_signals(stop):  # Ctrl-C, SIGTERM, SIGHUP: end the run as "stopped"
            return session.record(stop)
    except StoreError as exc:
        if session.writer is None:
            raise
        raise StoreError(
            f"{exc}; recording stopped, run {session.writer.run_id} keeps what was committed "
            f"(continue with: benchlog record --resume {session.writer.run_id})"
        ) from exc
    finally:
        session.close()


def _event_argv(args) -> list[str] | None:
    """The --on-event command's words, checked before anything starts (a usage error otherwise)."""
    import math
    import os
    import shlex
    import shutil

    from benchlog.errors import UsageError

    if not (math.isfinite(args.event_timeout_s) and args.event_timeout_s > 0):
        raise UsageError("--event-timeout-s must be a number of seconds > 0")
    if not (math.isfinite(args.event_after_s) and args.event_after_s >= 0):
        raise UsageError("--event-after-s must be a number of seconds >= 0")
    if args.on_event is None:
        return None
    try:
        argv = shlex.split(args.on_event)
    except ValueError as exc:
        raise UsageError(f"--on-event: cannot split {args.on_event!r} into words: {exc}") from None
    if not argv:
        raise UsageError("--on-event needs a command")
    prog = argv[0]
    if os.sep in prog:
        if not (os.path.isfile(prog) and os.access(prog, os.X_OK)):
            raise UsageError(f"--on-event: {prog} is not an executable file")
    elif shutil.which(prog) is None:
        raise UsageError(f"--on-event: no command {prog!r} on the PATH")
    return argv


def _say(line: str) -> None:
    print(line, file=sys.stderr, flush=True)


def _open_existing(db):
    """The store at `db`, or None when it is a SQLite file not made yet (checked it can be)."""
    import os
    from pathlib import Path

    from sqlalchemy.engine import make_url

    from benchlog.errors import StoreError
    from benchlog.store import Store, resolve_url

    url = make_url(resolve_url(db))
    path = url.database if url.get_backend_name() == "sqlite" else None
    if path and not path.startswith("file:") and path != ":memory:" and not Path(path).exists():
        parent = Path(path).parent
        if not parent.is_dir():
            raise StoreError(f"cannot create the database {path}: folder {parent} does not exist")
        if not os.access(parent, os.W_OK):
            raise StoreError(f"cannot create the database {path}: folder {parent} is read-only")
        return None
    if path is None:  # a server database with no benchlog tables yet gets them only once heard
        from benchlog.store._engine import is_empty, make_engine

        engine = make_engine(url.render_as_string(hide_password=False))
        try:
            if is_empty(engine):
                return None
        finally:
            engine.dispose()
    return Store.open(db)


def _sim_config(args):
    from dataclasses import replace
    from pathlib import Path

    from benchlog.sim import load_config, load_preset, preset_names

    cfg = load_config(args.sim) if Path(args.sim).is_file() else None
    if cfg is None:
        if args.sim not in preset_names():
            from benchlog.errors import ConfigError

            raise ConfigError(f"no simulator preset {args.sim!r}: one of {', '.join(preset_names())}")
        cfg = load_preset(args.sim)
    # the recorder drives the cycling itself: a preset's cycling at power-up would add cycles to the run
    # before its profile starts (and past its target)
    cfg = replace(cfg, autostart=None)
    faults = {}
    if args.sim_pull_at is not None:
        faults["pull_at_s"] = args.sim_pull_at
    if args.sim_pull_for is not None:
        faults["pull_for_s"] = args.sim_pull_for
    return cfg.with_faults(**faults) if faults else cfg


class _Session:
    def __init__(self, args, store, sim_cfg, event_argv=None) -> None:
        self.args = args
        self.event_argv = event_argv
        self.events = None
        self.store = store
        self.sim_cfg = sim_cfg
        self.sim = None
        self.feed = None
        self.writer = None

    def close(self) -> None:
        if self.events is not None:  # an error ended the recording: its calls are killed, not awaited
            self.events.close(0.0)
        if self.writer is not None and not self.writer.closed:
            self.writer.abandon()
        if self.feed is not None:
            self.feed.close()
        if self.sim is not None:
            self.sim.stop()
        if self.store is not None:
            self.store.close()

    # -- what to record ------------------------------------------------------------------------------
    def _units(self):
        from benchlog.errors import UsageError
        from benchlog.recorder import UnitAssignment, parse_units

        a = self.args
        if a.units:
            return parse_units(a.units, part=a.part, lot=a.lot, supplier=a.supplier)
        if self.sim_cfg is not None:
            cfg = self.sim_cfg
            return [
                UnitAssignment(
                    u.channel,
                    u.serial,
                    a.part or u.population,
                    a.lot or "sim",
                    a.supplier or cfg.populations[u.population].supplier,
                )
                for u in cfg.units
            ]
        raise UsageError("give the units: --units CH=SERIAL ... (with --part) or CH=PART/LOT/SERIAL")

    def _plan(self):
        """Everything checked before the port opens, reading only: (units or None, profile, specs,
        (on_ms, off_ms), the run to resume or None)."""
        from benchlog.errors import StoreError, UsageError
        from benchlog.recorder._setup import spec_for

        a = self.args
        if a.resume is not None:
            if a.profile:
                raise UsageError("--resume keeps the run's own profile: leave out --profile")
            if self.store is None:
                raise StoreError(f"no run {a.resume}: there is no database yet")
            run = self.store.run(a.resume)
            if run.end_reason in ("target", "all_failed"):
                raise StoreError(f"run {run.id} is complete (ended: {run.end_reason}); start a new run")
            self.store.check_bench_free(name=run.bench)
            prof = run.profile
            on_ms, off_ms = float(prof["on_ms"]), float(prof["off_ms"])
            specs = {}
            for ru in self.store.run_units(a.resume):
                specs[ru.channel] = spec_for(ru.unit.part_number, a.spec)[0]
            return None, None, specs, (on_ms, off_ms), run
        if not a.bench:
            raise UsageError("give --bench NAME (or --resume RUN)")
        if not a.profile:
            raise UsageError("give --profile ON_MS:OFF_MS:CYCLES, e.g. 50:50:200000")
        profile = a.profile
        units = self._units()
        specs = {}
        for u in units:  # a spec that does not parse stops here, before anything is written
            specs[u.channel] = spec_for(u.part, a.spec)[0]
        if self.store is not None:  # refuse a second recorder before touching the port
            self.store.check_bench_free(name=a.bench)
        return units, profile, specs, (profile.on_ms, profile.off_ms), None

    def _prepare(self, units, profile):
        """The first writes, once the sampler is heard: the store (made if new), bench, lease, units."""
        from benchlog.recorder import register_units
        from benchlog.store import Store

        if self.store is None:
            self.store = Store.open(self.args.db)
        bench_id = self.store.register_bench(self.args.bench)
        token = self.store.acquire_bench(bench_id)
        try:
            ids, specs = register_units(self.store, units, self.args.spec)
        except BaseException:
            self.store.release_bench(bench_id, token)
            raise
        return (bench_id, token, ids, profile), specs

    # -- recording -----------------------------------------------------------------------------------
    def record(self, stop) -> int:
        from benchlog.analysis import AnalysisSettings
        from benchlog.ingest import Feed
        from benchlog.recorder import Recorder

        a = self.args
        units, profile, specs, (on_ms, off_ms), resumed = self._plan()
        speed = a.sim_speed if self.sim_cfg is not None else 1.0
        url = a.port
        if self.sim_cfg is not None:
            from benchlog.sim import PtySampler

            self.sim = PtySampler(self.sim_cfg, seed=a.sim_seed, speed=speed, keep_truth=False)
            self.sim.start()
            url = self.sim.path
        if self.sim_cfg is None and _is_capture(url):
            from benchlog.ingest import CaptureFeed

            self.feed = CaptureFeed(url)  # a capture file: read as a port, nothing sent
            stop = _Either(stop, self.feed.ended)
        else:
            self.feed = Feed(url, speed=speed)
        self.feed.open()
        early = self._await_sampler(url, stop)
        # the port is open and the sampler heard: only now is anything written
        new = None
        if resumed is not None:
            self.writer = self.store.resume_run(resumed.id)
        else:
            new, specs = self._prepare(units, profile)
        ann = self.feed.timeline.announcement
        if new is not None:
            bench_id, token, ids, profile = new
            if ann is not None:
                self.store.update_bench(
                    bench_id,
                    board_id=ann.board_id,
                    clock_hz=ann.clock_hz,
                    counter_bits=ann.counter_bits,
                    channels=ann.channels,
                )
            self.writer = self.store.start_run(
                bench_id,
                ids,
                profile=profile.as_dict,
                target_cycles=profile.cycles,
                rollup_window=a.window,
                fail_after=a.fail_after,
                lease_token=token,
                note=a.note,
                protocol_version=getattr(ann, "version", None),
                board_id=getattr(ann, "board_id", None),
                clock_hz=getattr(ann, "clock_hz", None),
            )
        first = next((sp for sp in specs.values() if sp is not None), None)
        settings = first.settings() if first is not None else AnalysisSettings()
        if self.event_argv is not None:
            self.events = self._event_command(a.bench if resumed is None else resumed.bench)
        rec = Recorder(
            self.writer,
            settings=settings,
            specs=specs,
            fail_after=a.fail_after,
            events=self.events,
            event_after_s=a.event_after_s,
        )
        for timed in early:
            rec.push(timed)
        # a port that refuses the plans just now (the cable out) does not end the recording: they wait, and
        # are sent again if the sampler never answers them (see Recorder.start)
        rec.start(self.feed, int(on_ms * 1000), int(off_ms * 1000))
        tty = sys.stderr.isatty()
        print(
            f"benchlog: recording run {self.writer.run_id} on {len(self.writer.units)} channels"
            f" (Ctrl-C stops)",
            file=sys.stderr,
        )

        def show(p) -> None:
            if a.quiet:
                return
            if tty:
                print("\r" + p.line().ljust(100), end="", file=sys.stderr, flush=True)
            else:
                print(p.line(), file=sys.stderr, flush=True)

        reason = rec.run(
            self.feed,
            stop,
            on_progress=show,
            progress_every_s=1.0 if tty else 5.0,
            grace_s=max(0.3, 2 * (on_ms + off_ms) / 1000 / speed),
        )
        if tty and not a.quiet:
            print(file=sys.stderr)
        p = rec.progress()
        print(
            f"run {p.run_id} ended ({reason}): {p.cycles_done:,} cycles, {p.actuations:,} actuations, "
            f"{p.failed}/{p.units} units failed, {p.incidents} incidents"
        )
        return 0

    def _event_command(self, bench: str):
        from benchlog.recorder import EventCommand

        ev = EventCommand(self.event_argv, timeout_s=self.args.event_timeout_s, say=_say)
        ev.context = {"run": self.writer.run_id, "bench": bench}
        for ru in self.store.run_units(self.writer.run_id):
            u = ru.unit
            ev.units[ru.channel] = {"unit": u.serial, "unit_id": u.id, "part": u.part_number, "lot": u.lot}
        return ev

    def _await_sampler(self, url: str, stop, announce_s: float = 5.0):
        """The batches read until the sampler announces itself (up to `announce_s`: an older sampler
        does not), and in any case until it has said anything at all: a port where nothing answers
        (wrong port, sampler unpowered or still flashing) gets nothing written, however long the
        wait, and ends in one line when the user stops it."""
        import time

        from benchlog.errors import PortError

        got = []
        t_end = time.monotonic() + announce_s
        told = False
        while self.feed.timeline.announcement is None:
            heard = self.feed.counters.records > 0
            if heard and time.monotonic() >= t_end:
                break
            if stop.is_set():
                if heard:
                    break
                raise PortError(f"no sampler answered on {url}; nothing was written")
            if not heard and not told and time.monotonic() >= t_end:
                told = True
                print(
                    f"benchlog: no reply from a sampler on {url} yet; waiting (nothing is written"
                    " until it answers; Ctrl-C stops)",
                    file=sys.stderr,
                    flush=True,
                )
            got.append(self.feed.poll(0.1))
        return got


def _is_capture(url: str) -> bool:
    """A regular file (a capture saved by another logger), not a device, pty or URL."""
    import os
    import stat

    try:
        return stat.S_ISREG(os.stat(url).st_mode)
    except (OSError, ValueError):
        return False


class _Either:
    """Stop when either event is set (Ctrl-C, or the end of a capture file)."""

    def __init__(self, a, b) -> None:
        self.a, self.b = a, b

    def is_set(self) -> bool:
        return self.a.is_set() or self.b.is_set()
