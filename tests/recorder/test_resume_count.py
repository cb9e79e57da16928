"""A recorder killed and resumed mid-run counts every cycle once, and numbers every actuation by its true
cycle, whatever the phase of a cycle the kill and the resume fall in.

Ground truth is the simulator's own record: `Truth.cycles` (cycles whose actuator it switched on) and
`Truth.actuations` (each cycle's make and break with its true operate and release time). The simulated
sampler is driven directly, not through a pty: the host's clock follows the sampler's, the killed
recorder stops right after a commit at a chosen sampler time, and the resumed one starts listening at a
chosen point of a cycle, so what each recorder saw is decided by the test, not by the machine's load.

A kill -9 is `RunWriter.abandon()` (nothing more is written) and the bench's lease is released as
`acquire_bench` would find it for a process that is gone (the killed one here is this process).
"""

from __future__ import annotations

import numpy as np
import pytest

from benchlog.analysis import load_spec
from benchlog.clock import Timeline
from benchlog.events import CYCLES_NOT_OBSERVED
from benchlog.recorder import Recorder
from benchlog.sim import Bench
from benchlog.store import Store
from benchlog.wire import Go, Who
from tests.recorder._helpers import demo_config, start_run

MS = 1_000_000
ON_US = OFF_US = 50_000  # cycle k (1-based) switches on at (k - 1) * 100 ms + 0.1 ms (GO starts 0.1 ms on)
TARGET = 300
CHANNELS = (0, 1)
# the demo units (seed 5) operate 4.3-8.7 ms and release 2.5-5.6 ms after their drive; all settle
# within 10 ms of it


def _recorder(writer) -> Recorder:
    spec = load_spec("AG-MS5")
    return Recorder(writer, settings=spec.settings(), specs=dict.fromkeys(CHANNELS, spec))


class _Host:
    """One recorder's view of the sampler: its records, placed by its own timeline, at host time =
    sampler time (in steps of `step_ms`, each followed by a commit, as the recorder commits at least
    once a second)."""

    def __init__(self, bench: Bench, rec: Recorder, *, resumed: bool) -> None:
        self.bench, self.rec, self.timeline = bench, rec, Timeline()
        t = bench.now_ns
        records = bench.advance_to(t)
        if resumed:  # a feed opening asks the sampler who it is
            self.timeline.expect_announcement(t)
            records += bench.command(Who())
        for plan in rec.plans(ON_US, OFF_US):  # what `benchlog record` sends, resumed or not
            records += bench.command(plan)
        records += bench.command(Go())
        self._push(records, t)

    def _push(self, records: list, t_ns: int) -> None:
        self.rec.push(self.timeline.push(records, t_ns))
        self.rec.maybe_flush(force=True)

    def run_to(self, t_end_ns: int, step_ms: int = 100) -> None:
        while self.bench.now_ns < t_end_ns:
            t = min(self.bench.now_ns + step_ms * MS, t_end_ns)
            self._push(self.bench.advance_to(t), t)


def _killed_and_resumed(tmp_path, kill_ms: float, resume_ms: float, seed: int = 5):
    store = Store.open(str(tmp_path / "resume.sqlite"))
    writer = start_run(store, CHANNELS, TARGET, "bench R")
    bench = Bench(demo_config(), seed)
    first = _Host(bench, _recorder(writer), resumed=False)
    first.run_to(int(kill_ms * MS))
    writer.abandon()  # kill -9 right after a commit
    store.release_bench(writer.bench_id, writer.lease_token)
    bench.advance_to(int(resume_ms * MS))  # the sampler cycles on; nobody reads what it sends
    again = _Host(bench, _recorder(store.resume_run(writer.run_id)), resumed=True)
    # the sampler's plan (sent before the kill) ends at the target: run until the recorder sees it
    end = bench.now_ns + 2 * TARGET * (ON_US + OFF_US) * 1000  # a ceiling in sampler time, not a wait
    while not again.rec.target_reached() and bench.now_ns < end:
        again.run_to(bench.now_ns + 100 * MS)
    again.run_to(bench.now_ns + 200 * MS)  # the last break
    again.rec.finish("target")
    return store, writer.run_id, bench


CASES = {
    # the resumed recorder first hears the drive-off and the break of a cycle whose drive-on it missed
    # (it came back in the cycle's on-phase, after the make): the recording that counted 301 of 300
    "resumed-after-a-make": (3_030.0, 18_030.0),
    # as above, and the killed recorder had committed the make of its last cycle but not its break
    # (at 3,075 ms: the analysis emits a cycle's rows once no later record can change them)
    "killed-owing-a-break-resumed-after-a-make": (3_075.0, 18_030.0),
    # came back after a drive-on, before its contact's make: it hears the make, then the drive-off
    "resumed-before-a-make": (3_030.0, 18_002.1),
    # came back in an off-phase: the next drive-on is the first thing it hears
    "resumed-in-an-off-phase": (3_075.0, 18_075.0),
}


@pytest.mark.parametrize(("kill_ms", "resume_ms"), CASES.values(), ids=CASES.keys())
def test_a_resumed_recorder_counts_each_cycle_once_and_numbers_it_truly(tmp_path, kill_ms, resume_ms):
    store, run_id, bench = _killed_and_resumed(tmp_path, kill_ms, resume_ms)
    try:
        truth = bench.truth
        assert store.run(run_id).segments == 2
        lost: dict[int, int] = {}
        for inc in store.incidents(run_id, kind=CYCLES_NOT_OBSERVED):
            lost[inc.channel] = lost.get(inc.channel, 0) + inc.cycles_lost
        true_rows = truth.actuations
        for ru in store.run_units(run_id):
            ch = ru.channel
            assert truth.cycles[ch] == TARGET  # the sampler ran its plan once, to the end
            assert (ru.cycles_done, ru.unit.cycles) == (TARGET, TARGET), ch
            acts = store.actuations(units=[ru.unit.id])
            makes = acts["cycle"][acts["kind"] == 0]
            assert len(np.unique(makes)) == len(makes) and makes.max() < TARGET  # no cycle twice
            # each cycle is measured or reported not observed, not both; the first recorder's
            # uncommitted cycles and the 15 s away are the gap (about 150 cycles)
            assert 140 <= lost[ch] and len(makes) + lost[ch] <= TARGET, (len(makes), lost[ch])
            # every actuation is stored under its true cycle: its measured operate / release time is
            # that cycle's (the clock resolves it to 1 us; neighbouring cycles differ by ~500 us)
            mine = true_rows[true_rows["channel"] == ch]
            true_us = {
                (int(c), int(k)): x
                for c, k, x in zip(mine["cycle"], mine["kind"], mine["transit_us"], strict=True)
            }
            timed = acts[~np.isnan(acts["transit_us"])]
            assert len(timed) >= 2 * (TARGET - lost[ch]) - 4
            off = [
                (int(c), int(k), float(x))
                for c, k, x in zip(timed["cycle"], timed["kind"], timed["transit_us"], strict=True)
                if not abs(x - true_us[(int(c), int(k))]) <= 2.0
            ]
            assert off == [], (ch, off[:5])
    finally:
        store.close()


def test_a_run_resumed_at_its_target_plans_no_cycle_more(tmp_path):
    """A recorder killed after the run's last cycle was counted (its make written, the run not yet
    closed) leaves the run at its target. `record --sim` starts a new simulated sampler with each
    recorder: the resumed recorder must plan nothing on such a channel (a plan of 0 cycles means "until
    halted", so it sent 1: the lab-load test stored an extra make and break, cycle 200 of a 200-cycle
    target, on every unit, 3,208 actuations of 3,200). The other channel is planned for what it still
    owes. Common practice, no source: a life test stops at its target."""
    store = Store.open(str(tmp_path / "at-target.sqlite"))
    try:
        writer = start_run(store, CHANNELS, TARGET, "bench T")
        writer.cycles_done[0], writer.cycles_done[1] = TARGET, TARGET - 3
        writer.flush()
        writer.abandon()
        store.release_bench(writer.bench_id, writer.lease_token)
        rec = _recorder(store.resume_run(writer.run_id))
        assert [(p.channel, p.cycles) for p in rec.plans(ON_US, OFF_US)] == [(1, 3)]
    finally:
        store.close()
