"""Running the recorder against the simulated sampler on a real pseudo-terminal."""

from __future__ import annotations

import re
import threading

from benchlog.analysis import BREAK, MAKE, load_spec
from benchlog.events import CYCLES_NOT_OBSERVED
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


_SPAN = re.compile(r"\(cycles? ([\d,]+)(?:-([\d,]+))? of the unit's life\)")


def not_observed_cycles(store, run_id: int) -> dict[int, list[int]]:
    """Channel -> the life cycles its CYCLES_NOT_OBSERVED incidents name (a cycle named twice, twice)."""
    out: dict[int, list[int]] = {}
    for inc in store.incidents(run_id, kind=CYCLES_NOT_OBSERVED):
        m = _SPAN.search(inc.detail)
        assert m is not None, inc.detail
        lo = int(m.group(1).replace(",", ""))
        hi = int((m.group(2) or m.group(1)).replace(",", ""))
        assert hi - lo + 1 == inc.cycles_lost, inc.detail
        out.setdefault(inc.channel, []).extend(range(lo, hi + 1))
    return out


def check_cycles_against_truth(store, run_id: int, truth_cycles: dict[int, int]):
    """Every cycle the sampler did (the simulator's `Truth.cycles`) is accounted for once: observed (its
    make or its break, or both, measured: a row under its cycle) or reported not observed, never both and
    never twice; each unit's life count is the true count. A cycle with only a break measured (its
    drive-on lost, its drive-off heard) is observed. Returns channel -> (make cycles, break cycles,
    not-observed cycles), as run cycles."""
    gaps = not_observed_cycles(store, run_id)
    out = {}
    for ru in store.run_units(run_id):
        ch, base = ru.channel, ru.cycle_base
        truth = truth_cycles[ch]
        assert (ru.cycles_done, ru.unit.cycles - base) == (truth, truth), (ch, ru.cycles_done, truth)
        rows = store.actuations(units=[ru.unit.id])
        makes = (rows["cycle"][rows["kind"] == MAKE] - base).tolist()
        breaks = (rows["cycle"][rows["kind"] == BREAK] - base).tolist()
        lost = [c - base for c in gaps.get(ch, [])]
        assert len(set(makes)) == len(makes), (ch, "a make row twice", len(makes) - len(set(makes)))
        assert len(set(breaks)) == len(breaks), (ch, "a break row twice", len(breaks) - len(set(breaks)))
        assert len(set(lost)) == len(lost), (ch, "a cycle reported not observed twice", sorted(lost))
        measured = set(makes) | set(breaks)
        both = sorted(measured & set(lost))
        assert not both, (ch, "measured and reported not observed", both)
        accounted, every = measured | set(lost), set(range(truth))
        assert accounted <= every, (ch, "beyond the true count", sorted(accounted - every))
        missing = sorted(every - accounted)
        assert not missing, (ch, "neither measured nor reported", missing)
        out[ch] = (sorted(makes), sorted(breaks), sorted(lost))
    return out
