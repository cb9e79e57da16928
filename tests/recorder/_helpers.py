"""Running the recorder against the simulated sampler on a real pseudo-terminal."""

from __future__ import annotations

import threading

from benchlog.analysis import load_spec
from benchlog.ingest import Feed
from benchlog.recorder import Recorder
from benchlog.sim import PtySampler, load_preset
from tests.conftest import HANG_S

SPEED = 20.0


def start_run(store, channels, cycles: int, bench: str = "bench T", **kw):
    """A run of units T-<channel> (part AG-MS5, lot T1) on `bench`: `cycles` cycles of 50 ms on / 50 ms
    off; returns its RunWriter (`kw` goes to `Store.start_run`)."""
    part = store.register_part("AG-MS5", "Ashgrove Components")
    lot = store.register_lot(part, "T1")
    units = {ch: store.register_unit(lot, f"T-{ch}") for ch in channels}
    return store.start_run(
        store.register_bench(bench),
        units,
        profile={"on_ms": 50, "off_ms": 50, "cycles": cycles},
        target_cycles=cycles,
        rollup_window=20,
        **kw,
    )


def demo_config(**faults):
    cfg = load_preset("demo")
    return cfg.with_faults(**faults) if faults else cfg


def record_sim(
    store,
    cfg,
    channels,
    cycles,
    *,
    speed=SPEED,
    bench="bench T",
    seed=3,
    timeout_s=None,
    fail_after=5,
    on_running=None,
    keep_sim=False,
    events=None,
):
    """Record `cycles` cycles (50 ms on / 50 ms off) of `channels` of `cfg`; returns (reason, writer,
    recorder, sim, feed counters).

    `timeout_s` is a ceiling only a hang reaches (at least `HANG_S`): a loaded machine slows the
    simulated bench down, it never ends a recording early."""
    writer = start_run(store, channels, cycles, bench, fail_after=fail_after)
    spec = load_spec("AG-MS5")
    rec = Recorder(
        writer,
        settings=spec.settings(),
        specs=dict.fromkeys(channels, spec),
        fail_after=fail_after,
        events=events,
    )
    stop = threading.Event()
    timer = threading.Timer(max(timeout_s or 0, HANG_S), stop.set)
    timer.start()
    try:
        with (
            PtySampler(cfg, seed=seed, speed=speed) as sim,
            Feed(sim.path, speed=speed, wait_s=5.0, backoff_s=(0.01, 0.1)) as feed,
        ):
            feed.start_cycling(rec.plans(50_000, 50_000))
            if on_running:
                on_running(sim, writer)
            reason = rec.run(feed, stop, grace_s=0.3)
            counters = feed.counters
    finally:
        timer.cancel()
    return reason, writer, rec, sim, counters
