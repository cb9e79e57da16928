"""A sampler that loses power mid-run comes back reset, without its plans: the recorder plans the cycles
still due again, so each unit ends at exactly its target, whatever the phase of the cycle the power cut.

Ground truth is the simulator's own record: `Truth.cycles` (cycles whose actuator it switched on, a cycle
cut short by the power loss included: its coil was energised). The simulated sampler is driven directly,
not through a pty: the host's clock follows the sampler's, so the power fails at a chosen point of a
cycle, after the host heard everything sent before it (a bus-powered board on a pulled cable; the port's
outage is noted as the feed notes it). The commands the recorder owes the sampler after the reset go to
the simulated sampler through `Recorder.send_pending`, as they go to a port.
"""

from __future__ import annotations

import re

import pytest

from benchlog.analysis import load_spec
from benchlog.clock import Timeline
from benchlog.events import CYCLES_NOT_OBSERVED, RESET
from benchlog.recorder import Recorder
from benchlog.sim import Bench
from benchlog.store import Store
from benchlog.wire import Go, Plan
from tests.recorder._helpers import demo_config, start_run

MS = 1_000_000
ON_US = OFF_US = 50_000  # cycle k (1-based) switches on at (k - 1) * 100 ms + 0.1 ms (GO starts 0.1 ms on)
TARGET = 100
CHANNELS = (0, 1)
# the demo units (seed 5) operate 4.3-8.7 ms and release 2.5-5.6 ms after their drive


class _Host:
    """The recorder's side of the sampler: records placed by the recorder's own timeline at host time =
    sampler time, in steps of `step_ms` each followed by a commit; commands written to the sampler."""

    def __init__(self, bench: Bench, rec: Recorder) -> None:
        self.bench, self.rec, self.timeline = bench, rec, Timeline()
        self.sent: list = []
        self._replies: list = []
        records = bench.advance_to(bench.now_ns)
        for cmd in [*rec.plans(ON_US, OFF_US), Go()]:  # what `benchlog record` sends first
            self.sent.append(cmd)
            records += bench.command(cmd)
        self._push(records, bench.now_ns)

    def send(self, cmd) -> None:
        """The port: the sampler obeys at once; its replies come with the next records."""
        self.sent.append(cmd)
        self._replies += self.bench.command(cmd)

    def _push(self, records: list, t_ns: int) -> None:
        records, self._replies = self._replies + records, []
        self.rec.push(self.timeline.push(records, t_ns))
        self.rec.send_pending(self)
        self.rec.maybe_flush(force=True)

    def run_to(self, t_end_ns: int, step_ms: int = 100) -> None:
        while self.bench.now_ns < t_end_ns:
            t = min(self.bench.now_ns + step_ms * MS, t_end_ns)
            self._push(self.bench.advance_to(t), t)

    def power_cut(self, off_ms: float, cable_pulled: bool) -> None:
        """The board is off for `off_ms` and comes back reset (after its boot time); with the cable
        pulled the port was gone meanwhile, and the feed reports the outage first."""
        t_cut = self.bench.now_ns
        records = self.bench.power_cycle(int(off_ms * MS))
        if cable_pulled:
            self.timeline.note_disconnect(t_cut, t_cut + int(off_ms * MS))
        self._push(records, self.bench.now_ns)


def _recorded_through_a_power_cut(tmp_path, cut_ms: float, off_ms: float, cable_pulled: bool):
    store = Store.open(str(tmp_path / "reset.sqlite"))
    writer = start_run(store, CHANNELS, TARGET, "bench P")
    spec = load_spec("AG-MS5")
    rec = Recorder(writer, settings=spec.settings(), specs=dict.fromkeys(CHANNELS, spec))
    bench = Bench(demo_config(), 5)
    host = _Host(bench, rec)
    host.run_to(int(cut_ms * MS))
    started = dict(bench.truth.cycles)  # cycles begun before the power failed (the cut one too)
    host.power_cut(off_ms, cable_pulled)
    end = bench.now_ns + 3 * TARGET * (ON_US + OFF_US) * 1000  # a ceiling in sampler time, not a wait
    while not rec.target_reached() and bench.now_ns < end:
        host.run_to(bench.now_ns + 100 * MS)
    host.run_to(bench.now_ns + 500 * MS)  # anything the sampler would still do (it does nothing)
    rec.finish("target")
    return store, writer.run_id, bench, host, started


_SPAN = re.compile(r"\(cycles? ([\d,]+)(?:-([\d,]+))? of the unit's life\)")


def _not_observed(store, run_id: int) -> dict[int, list[int]]:
    """The life cycles each channel's CYCLES_NOT_OBSERVED incidents stand for."""
    out: dict[int, list[int]] = {}
    for inc in store.incidents(run_id, kind=CYCLES_NOT_OBSERVED):
        m = _SPAN.search(inc.detail)
        assert m is not None, inc.detail
        lo = int(m.group(1).replace(",", ""))
        hi = int((m.group(2) or m.group(1)).replace(",", ""))
        assert hi - lo + 1 == inc.cycles_lost, inc.detail
        out.setdefault(inc.channel, []).extend(range(lo, hi + 1))
    return out


CASES = {
    # cycle 31 switches on at 3,000.1 ms: its contact makes ~5 ms later, it switches off at 3,050.1 ms
    # and the contact releases ~3-6 ms after that. A cut within the on-phase is the cycle counted yet
    # unfinished: the plan sent again after it was one cycle too long
    "cable-pulled-before-a-make": (3_002.1, 10_000.0, True),
    "cable-pulled-after-a-make": (3_030.0, 10_000.0, True),
    "cable-pulled-before-a-break": (3_052.0, 10_000.0, True),
    "cable-pulled-in-an-off-phase": (3_075.0, 10_000.0, True),
    # a brown-out: the board resets in place, the port stays (nothing reports an outage)
    "brown-out-after-a-make": (3_030.0, 20.0, False),
}


@pytest.mark.parametrize(("cut_ms", "off_ms", "cable_pulled"), CASES.values(), ids=CASES.keys())
def test_the_plan_sent_again_after_a_reset_ends_each_unit_at_its_target(
    tmp_path, cut_ms, off_ms, cable_pulled
):
    store, run_id, bench, host, started = _recorded_through_a_power_cut(
        tmp_path, cut_ms, off_ms, cable_pulled
    )
    try:
        truth = bench.truth
        assert len(truth.resets) == 1 and len(store.incidents(run_id, kind=RESET)) == 1
        # planned twice: at the start, and after the reset for exactly the cycles still due
        plans = [c for c in host.sent if isinstance(c, Plan)]
        assert sum(isinstance(c, Go) for c in host.sent) == 2 and len(plans) == 2 * len(CHANNELS)
        again = {p.channel: p.cycles for p in plans[len(CHANNELS) :]}
        assert again == {ch: TARGET - started[ch] for ch in CHANNELS}
        gaps = _not_observed(store, run_id)
        for ru in store.run_units(run_id):
            ch = ru.channel
            assert truth.cycles[ch] == TARGET, (ch, truth.cycles[ch])
            assert (ru.cycles_done, ru.unit.cycles) == (TARGET, TARGET), ch
            # every cycle is measured (a make row under its cycle) or reported not observed, never both
            makes = store.actuations(units=[ru.unit.id], kind="make")["cycle"].tolist()
            lost = gaps.get(ch, [])
            assert len(set(makes)) == len(makes) and len(set(lost)) == len(lost)
            assert not set(makes) & set(lost), sorted(set(makes) & set(lost))
            assert sorted(makes + lost) == list(range(TARGET)), sorted(set(range(TARGET)) - set(makes + lost))
    finally:
        store.close()
