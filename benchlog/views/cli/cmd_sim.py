"""`benchlog sim`: serve a simulated sampler on a pseudo-terminal until Ctrl-C, SIGTERM or SIGHUP."""

from __future__ import annotations

import argparse

from benchlog.views.cli._args import add_profile, number_within, positive

NAME = "sim"
HELP = "Run a simulated sampler bench on a pseudo-terminal and print its port path."


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--preset", default="demo", help="a shipped preset name or a TOML file (default: demo)")
    p.add_argument("--list-presets", action="store_true", help="list the shipped simulator presets and exit")
    p.add_argument("--form", choices=("line", "packed"), help="record form at power-up (default: preset's)")
    p.add_argument("--speed", type=positive, default=1.0, help="sampler time runs N times the wall clock")
    p.add_argument("--seed", type=int, default=0, help="random seed (units, bounce, faults)")
    p.add_argument("--link", help="path of the port link to create (default: a new temporary directory)")
    p.add_argument("--counter-bits", type=int, help="override the sampler's counter width (16-64)")
    p.add_argument("--ppm", type=float, help="override the sampler clock error, parts per million")
    add_profile(p, "start cycling every unit at power-up with this profile, without waiting for the host")
    g = p.add_argument_group("faults")
    g.add_argument(
        "--drop-rate",
        type=number_within(0, 1, low_inclusive=True),
        help="probability per byte that it is lost",
    )
    g.add_argument(
        "--flip-rate",
        type=number_within(0, 1, low_inclusive=True),
        help="probability per byte that one bit flips",
    )
    g.add_argument("--reset-at-cycle", type=int, help="the sampler restarts before this cycle")
    g.add_argument("--pull-at", type=float, metavar="SECONDS", help="pull the cable at this sampler time")
    g.add_argument("--pull-for", type=float, metavar="SECONDS", help="wall seconds the cable stays out")
    g.add_argument("--bus-powered", action="store_true", help="a pulled cable also powers the board off")
    g.add_argument("--buffer-edges", type=int, help="sampler edge buffer size (with --drain-rate)")
    g.add_argument("--drain-rate", type=float, metavar="EDGES_PER_S", help="sampler transmit rate limit")


def run(args: argparse.Namespace) -> int:
    import threading
    from dataclasses import replace

    from benchlog.sim import Autostart, PtySampler, load_preset, preset_names
    from benchlog.views.cli._signals import stop_signals

    if args.list_presets:
        for name in preset_names():
            print(name)
        return 0
    cfg = load_preset(args.preset)
    sampler = {}
    if args.form:
        sampler["form"] = args.form
    if args.counter_bits is not None:
        sampler["counter_bits"] = args.counter_bits
    if args.ppm is not None:
        sampler["ppm"] = args.ppm
    if sampler:
        cfg = cfg.with_sampler(**sampler)
    faults = {
        k: v
        for k, v in {
            "drop_rate": args.drop_rate,
            "flip_rate": args.flip_rate,
            "reset_at_cycle": args.reset_at_cycle,
            "pull_at_s": args.pull_at,
            "pull_for_s": args.pull_for,
            "buffer_edges": args.buffer_edges,
            "drain_edges_per_s": args.drain_rate,
        }.items()
        if v is not None
    }
    if args.bus_powered:
        faults["pull_powers_off"] = True
    if faults:
        cfg = cfg.with_faults(**faults)
    if args.profile:
        prof = args.profile
        cfg = replace(cfg, autostart=Autostart(prof.on_ms, prof.off_ms, prof.cycles))

    stop = threading.Event()
    with stop_signals(stop), PtySampler(cfg, seed=args.seed, speed=args.speed, link=args.link) as sim:
        units = ", ".join(f"{u.channel}:{u.serial}" for u in cfg.units)
        print(sim.path, flush=True)
        print(
            f"# {cfg.source}: board {cfg.sampler.board_id}, {cfg.sampler.form} form, "
            f"{cfg.sampler.counter_bits}-bit counter at {cfg.sampler.clock_hz} Hz, speed x{args.speed:g}; "
            f"units {units}",
            flush=True,
        )
        try:
            while not stop.wait(0.2):
                if sim.error is not None:
                    raise sim.error
        except KeyboardInterrupt:
            pass
        b = sim.bench
        print(
            f"# served {b.now_ns / 1e9:.1f} s of sampler time, {b.edges_generated} edges, "
            f"{sim.bytes_written} bytes written, {len(sim.outages)} cable pulls",
            flush=True,
        )
    return 0
