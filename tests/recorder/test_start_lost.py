"""A cable out as the recorder sends its first plans and GO does not end or stall the recording.

Two ways the start can meet a pulled cable, each made certain by the simulated sampler (a real pty):
the port is already gone when the plans are sent (the port refuses them), or the cable comes out as the
first command arrives (the sampler never obeys it, nor whatever else the host wrote before it noticed).
Either way the recording must start once the cable is back and end at its target with every unit at
exactly the target, as the simulator's own count says (ground truth: `Bench.cycles_done`, the cycles it
switched each actuator on for since its GO).
"""

from __future__ import annotations

import threading

import pytest

from benchlog.analysis import load_spec
from benchlog.ingest import Feed
from benchlog.recorder import Recorder
from benchlog.sim import PtySampler
from benchlog.store import END_TARGET, Store
from tests.conftest import HANG_S, wait_until
from tests.recorder._helpers import SPEED, demo_config, start_run

TARGET = 60
CHANNELS = (0, 1)


@pytest.mark.parametrize("how", ["refused", "lost"])
def test_a_start_cut_by_a_pulled_cable_is_sent_again_and_reaches_the_target(tmp_path, how):
    store = Store.open(str(tmp_path / "start.sqlite"))
    writer = start_run(store, CHANNELS, TARGET, "bench S")
    spec = load_spec("AG-MS5")
    rec = Recorder(writer, settings=spec.settings(), specs=dict.fromkeys(CHANNELS, spec))
    stop = threading.Event()
    timer = threading.Timer(HANG_S, stop.set)  # a ceiling only a hang reaches
    timer.start()
    try:
        with (
            PtySampler(demo_config(), seed=4, speed=SPEED) as sim,
            Feed(sim.path, speed=SPEED, wait_s=5.0, backoff_s=(0.01, 0.1)) as feed,
        ):
            while feed.timeline.announcement is None and not stop.is_set():  # as `record` waits
                rec.push(feed.poll(0.1))
            if how == "refused":
                sim.pull_cable(1.0)
                wait_until(lambda: not sim.connected.is_set(), "the sampler to lose its cable")
                rec.start(feed, 50_000, 50_000)
                assert rec.pending  # the port took none of it: it waits for the cable
            else:
                sim.pull_cable(1.0, on_command=True)
                rec.start(feed, 50_000, 50_000)
            reason = rec.run(feed, stop, grace_s=0.3)
            truth = dict(sim.bench.cycles_done)
            outages = len(sim.outages)
    finally:
        timer.cancel()
    assert not stop.is_set(), "the recording hung"
    assert reason == END_TARGET and outages == 1
    assert rec.starts_resent >= 1
    assert truth == dict.fromkeys(CHANNELS, TARGET)  # started once, at the whole target: no cycle more
    assert {writer.cycles_done[ch] for ch in CHANNELS} == {TARGET}
    store.close()
