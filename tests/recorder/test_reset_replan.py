"""A sampler that loses power mid-run comes back reset, without its plans: the recorder plans the cycles
still due again, so each unit ends at exactly its target, whatever the phase of the cycle the power cut.

Ground truth is the simulator's own record: `Truth.cycles` (cycles whose actuator it switched on, a cycle
cut short by the power loss included: its coil was energised). The simulated sampler is driven directly,
not through a pty: the host's clock follows the sampler's, so the power fails at a chosen point of a
cycle, after the host heard everything sent before it (a bus-powered board on a pulled cable; the port's
outage is noted as the feed notes it). The commands the recorder owes the sampler after the reset go to
the simulated sampler through `Recorder.send_pending`, as they go to a port.

The power cut also releases every closed contact while the sampler is blind: every actuation outside the
cycle the cut fell in must be measured as the simulator's truth says (`Truth.actuations`), the first cycle
planned again included, at every point of a cycle the power can fail and in both wire forms. A cable
pulled from a self-powered board (no reset) must keep the contact's state across the outage.
"""

from __future__ import annotations

import numpy as np
import pytest

from benchlog.analysis import BREAK, INCOMPLETE, MAKE, MISSED, NO_CHANGE, NO_VERDICT, STUCK, load_spec
from benchlog.clock import Timeline
from benchlog.events import CYCLES_NOT_OBSERVED, DISCONNECT, RESET
from benchlog.recorder import Recorder
from benchlog.sim import Bench
from benchlog.store import Store
from benchlog.wire import Decoder, Go, Plan
from tests.recorder._helpers import check_cycles_against_truth, demo_config, not_observed_cycles, start_run

MS = 1_000_000
ON_US = OFF_US = 50_000  # cycle k (1-based) switches on at (k - 1) * 100 ms + 0.1 ms (GO starts 0.1 ms on)
TARGET = 100
CHANNELS = (0, 1)
CUT_CYCLE = 31  # the cuts fall in cycle 31 (1-based), which switches on at 3,000.1 ms
CUT_CYCLE_ON_MS = (CUT_CYCLE - 1) * 100 + 0.1
KINDS = {"make": MAKE, "break": BREAK}
FLUSH_MS = 500
# the demo units (seed 5) operate 4.3-8.7 ms and release 2.5-5.6 ms after their drive


class _Host:
    """The recorder's side of the sampler: records placed by the recorder's own timeline at host time =
    sampler time, in steps of `step_ms`, committed every `FLUSH_MS` of sampler time (the recorder's own
    pace); commands written to the sampler. With `wire` the records travel as bytes in that form
    (encoded by the sampler, read by the decoder, as a port's bytes are); without, as records."""

    def __init__(self, bench: Bench, rec: Recorder, wire: str | None = None) -> None:
        self.bench, self.rec, self.timeline = bench, rec, Timeline()
        self.decoder = Decoder() if wire else None
        self.sent: list = []
        self.outages: list[tuple[int, int]] = []  # sampler time of each cable pull: what it sent is lost
        self._replies: list = []
        self._flushed_ns = 0
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
        if self.decoder is not None:
            records = self.decoder.feed(self.bench.encode(records))
            if self.decoder.sequence_kept:  # as the feed does: nothing lost, no wraps to guess
                self.decoder.sequence_kept = None
                self.timeline.outage_bridged()
        self.rec.push(self.timeline.push(records, t_ns))
        self.rec.send_pending(self)
        if t_ns - self._flushed_ns >= FLUSH_MS * MS:
            self._flushed_ns = t_ns
            self.rec.maybe_flush(force=True)

    def run_to(self, t_end_ns: int, step_ms: int = 100) -> None:
        while self.bench.now_ns < t_end_ns:
            t = min(self.bench.now_ns + step_ms * MS, t_end_ns)
            self._push(self.bench.advance_to(t), t)

    def _outage(self, t_cut: int) -> None:
        """The port was gone from `t_cut` to now: the feed reports the outage first."""
        if self.decoder is not None:
            self.decoder.outage()
        self.timeline.note_disconnect(t_cut, self.bench.now_ns)

    def power_cut(self, off_ms: float, cable_pulled: bool) -> None:
        """The board is off for `off_ms` and comes back reset (after its boot time); with the cable
        pulled the port was gone meanwhile, and the feed reports the outage first."""
        t_cut = self.bench.now_ns
        records = self.bench.power_cycle(int(off_ms * MS))
        if cable_pulled:
            self._outage(t_cut)
        self._push(records, self.bench.now_ns)

    def cable_pull(self, off_ms: float) -> None:
        """A self-powered board keeps running with the cable out for `off_ms`: what it sends meanwhile
        is lost, and the feed reports the outage."""
        t_cut = self.bench.now_ns
        self.bench.advance_to(t_cut + int(off_ms * MS))
        self.outages.append((t_cut, self.bench.now_ns))
        self._outage(t_cut)


def _cut_at(bench: Bench, cut) -> int:
    """Sampler time of a cut point: ms, or ("make" | "break", fraction): that far into channel 0's
    bounce on the make or break of cycle 31 (the simulator's truth; the bounce must be there)."""
    if not isinstance(cut, tuple):
        return int(cut * MS)
    kind, frac = cut
    act = bench.truth.actuations
    row = act[(act["channel"] == 0) & (act["cycle"] == CUT_CYCLE - 1) & (act["kind"] == KINDS[kind])]
    assert len(row) == 1 and row["bounce_count"][0] > 0, row
    t0, t1 = int(row["t_first_ns"][0]), int(row["t_settle_ns"][0])
    return t0 + int(frac * (t1 - t0))


def _recorded_through_a_power_cut(
    tmp_path, cut, off_ms: float, cable_pulled: bool, wire: str | None = None, resets: bool = True
):
    store = Store.open(str(tmp_path / "reset.sqlite"))
    writer = start_run(store, CHANNELS, TARGET, "bench P")
    spec = load_spec("AG-MS5")
    rec = Recorder(writer, settings=spec.settings(), specs=dict.fromkeys(CHANNELS, spec))
    bench = Bench(demo_config() if wire is None else demo_config().with_sampler(form=wire), 5)
    host = _Host(bench, rec, wire)
    host.run_to(int(CUT_CYCLE_ON_MS * MS) + MS)  # cycle 31 switched on: its truth is drawn
    host.run_to(_cut_at(bench, cut))
    started = dict(bench.truth.cycles)  # cycles begun before the power failed (the cut one too)
    if resets:
        host.power_cut(off_ms, cable_pulled)
    else:
        host.cable_pull(off_ms)
    end = bench.now_ns + 3 * TARGET * (ON_US + OFF_US) * 1000  # a ceiling in sampler time, not a wait
    while not rec.target_reached() and bench.now_ns < end:
        host.run_to(bench.now_ns + 100 * MS)
    host.run_to(bench.now_ns + 500 * MS)  # anything the sampler would still do (it does nothing)
    rec.finish("target")
    return store, writer.run_id, bench, host, started


CASES = {
    # cycle 31 switches on at 3,000.1 ms: its contact makes ~5 ms later, it switches off at 3,050.1 ms
    # and the contact releases ~3-6 ms after that. A cut within the on-phase is the cycle counted yet
    # unfinished: the plan sent again after it was one cycle too long. Cut points in a bounce are placed
    # by channel 0's true bounce (channel 1 is wherever its own contact is then).
    # name: (cut point, power off for ms, cable pulled, wire form)
    "cable-pulled-before-a-make": (3_002.1, 10_000.0, True, "line"),
    "cable-pulled-in-a-make-bounce": (("make", 0.5), 10_000.0, True, "line"),
    "cable-pulled-after-a-make": (3_030.0, 10_000.0, True, "line"),
    "cable-pulled-before-a-break": (3_052.0, 10_000.0, True, "line"),
    "cable-pulled-in-a-break-bounce": (("break", 0.5), 10_000.0, True, "line"),
    "cable-pulled-in-an-off-phase": (3_075.0, 10_000.0, True, "line"),
    # a brown-out: the board resets in place, the port stays (nothing reports an outage)
    "brown-out-after-a-make": (3_030.0, 20.0, False, "line"),
    "packed-cable-pulled-after-a-make": (3_030.0, 10_000.0, True, "packed"),
    "packed-brown-out-in-a-make-bounce": (("make", 0.5), 20.0, False, "packed"),
}


@pytest.fixture(scope="module", params=CASES.values(), ids=CASES.keys())
def recording(request, tmp_path_factory):
    """One recording through a power cut per case, read by the tests below."""
    cut, off_ms, cable_pulled, wire = request.param
    store, run_id, bench, host, started = _recorded_through_a_power_cut(
        tmp_path_factory.mktemp("reset"), cut, off_ms, cable_pulled, wire
    )
    yield store, run_id, bench, host, started
    store.close()


def test_the_plan_sent_again_after_a_reset_ends_each_unit_at_its_target(recording):
    store, run_id, bench, host, started = recording
    truth = bench.truth
    assert len(truth.resets) == 1 and len(store.incidents(run_id, kind=RESET)) == 1
    # planned twice: at the start, and after the reset for exactly the cycles still due
    plans = [c for c in host.sent if isinstance(c, Plan)]
    assert sum(isinstance(c, Go) for c in host.sent) == 2 and len(plans) == 2 * len(CHANNELS)
    again = {p.channel: p.cycles for p in plans[len(CHANNELS) :]}
    assert again == {ch: TARGET - started[ch] for ch in CHANNELS}
    gaps = not_observed_cycles(store, run_id)
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


NOT_MEASURED = INCOMPLETE | MISSED | STUCK | NO_CHANGE


def _measured_as_the_truth(store, bench, ru, unmeasured: set[int]) -> np.ndarray:
    """Check the unit's actuations: a make and a break for every cycle outside `unmeasured` (the cycles
    the cut reached), each measured with its operate or release time, bounce and a verdict, equal to the
    simulator's truth; returns the rows."""
    rows = store.actuations(units=[ru.unit.id])
    ch = ru.channel
    mine = rows[~np.isin(rows["cycle"], sorted(unmeasured))]
    keys = list(zip(mine["cycle"].tolist(), mine["kind"].tolist(), strict=True))
    assert keys == [(c, k) for c in range(TARGET) if c not in unmeasured for k in (MAKE, BREAK)], ch
    bad = mine[((mine["flags"] & NOT_MEASURED) != 0) | (mine["verdict"] == NO_VERDICT)]
    assert not len(bad), (ch, [(int(r["cycle"]), int(r["kind"]), int(r["flags"])) for r in bad])
    act = bench.truth.actuations
    t = act[(act["channel"] == ch) & np.isin(act["cycle"], mine["cycle"])]
    t = t[np.lexsort((t["kind"], t["cycle"]))]
    np.testing.assert_array_equal(t["cycle"], mine["cycle"])
    # sampler ticks are 1 us and its clock runs 35 ppm off true time: a couple of us at most
    np.testing.assert_allclose(mine["transit_us"], t["transit_us"], atol=2.5, err_msg=f"channel {ch}")
    np.testing.assert_allclose(mine["bounce_us"], t["bounce_us"], atol=2.5, err_msg=f"channel {ch}")
    np.testing.assert_array_equal(mine["bounce_count"], t["bounce_count"], err_msg=f"channel {ch}")
    return rows


def test_after_a_reset_the_contact_is_measured_as_the_simulator_moved_it(recording):
    """The power cut released every closed contact (its coil lost power) while the sampler could not
    see it: the first cycle planned again must be measured like any other (its make from an open
    contact), and only the cycle the cut fell in goes unmeasured."""
    store, run_id, bench, host, started = recording
    for ru in store.run_units(run_id):
        cut = started[ru.channel] - 1  # the cycle whose coil was on last before the power failed
        rows = _measured_as_the_truth(store, bench, ru, {cut})
        first = rows[rows["cycle"] == cut + 1]  # the first cycle after the reset
        assert np.isfinite(first["transit_us"]).all() and np.isfinite(first["bounce_us"]).all(), first


SELF_POWERED = {
    # name: (cut point, cable out for ms, wire form, cycles whose drive-off arrives without their drive-on)
    # cut after cycle 31's make, back within cycle 41's on-phase: its drive-on is lost, its drive-off
    # (4,050.1 ms) and its break arrive: cycle 41 is observed by its break alone
    "after-a-make": (3_030.0, 1_000.0, "line", 1),
    # cut in cycle 31's break bounce, back in cycle 41's: both of its drives were lost
    "packed-in-a-break-bounce": (("break", 0.5), 1_000.0, "packed", 0),
    # cut in cycle 31's off-phase, back within cycle 41's on-phase: its drive-off arrives alone after a
    # drive-off (the level heard did not change), so the analysis measures nothing from it and its make
    # edges were lost: cycle 41 is not observed, in the same incident as the cycles before it
    "in-an-off-phase-back-in-an-on-phase": (3_075.0, 960.0, "line", 1),
}


def _drives_in_outage(bench, host, ch: int) -> tuple[list[int], list[int]]:
    """The simulator's truth for channel `ch` about the cable's outage: the cycles (0-based) both of whose
    drive records were sent while it was out, and those whose drive-on was and whose drive-off was not
    (break-only cycles)."""
    [(t0, t1)] = host.outages
    act = bench.truth.actuations
    mine = act[act["channel"] == ch]
    on = {int(r["cycle"]): int(r["t_drive_ns"]) for r in mine[mine["kind"] == MAKE]}
    off = {int(r["cycle"]): int(r["t_drive_ns"]) for r in mine[mine["kind"] == BREAK]}
    both = sorted(c for c, t in on.items() if t0 <= t < t1 and t0 <= off[c] < t1)
    break_only = sorted(c for c, t in on.items() if t0 <= t < t1 and off[c] >= t1)
    return both, break_only


@pytest.mark.parametrize(("cut", "off_ms", "wire", "lone"), SELF_POWERED.values(), ids=SELF_POWERED.keys())
def test_a_cable_pulled_from_a_self_powered_board_keeps_the_contact_state(tmp_path, cut, off_ms, wire, lone):
    """No reset: the sampler went on cycling for the second the cable was out (what it sent meanwhile is
    lost), the contact state is kept across the outage, and every cycle after it is measured as the
    truth; the cycles the outage hid are reported not observed, in one incident per unit. A cycle whose
    drive-on was lost and whose drive-off and break arrived after an on-phase is observed by its break: it
    has its break row, no make row, and is not in the incident."""
    store, run_id, bench, host, started = _recorded_through_a_power_cut(
        tmp_path, cut, off_ms, True, wire, resets=False
    )
    try:
        assert not bench.truth.resets and not store.incidents(run_id, kind=RESET)
        assert len(store.incidents(run_id, kind=DISCONNECT)) == 1
        assert sum(isinstance(c, Go) for c in host.sent) == 1
        truth = bench.truth.cycles
        assert all(truth[ch] == TARGET for ch in CHANNELS), truth
        seen = check_cycles_against_truth(store, run_id, truth)
        incidents = store.incidents(run_id, kind=CYCLES_NOT_OBSERVED)
        for ru in store.run_units(run_id):
            ch = ru.channel
            makes, breaks, lost = seen[ch]
            both, break_only = _drives_in_outage(bench, host, ch)
            assert both and both[0] == started[ch], (ch, both, started[ch])  # the cycles after the cut one
            assert len(break_only) == lone, (ch, break_only)  # the scenario is as its comment says
            # after an on-phase (the last drive heard switched on) the lone drive-off starts a break;
            # after an off-phase it repeats the level heard and starts nothing: the cycle is not observed
            heard_on = isinstance(cut, float) and (cut - 0.1) % 100 < 50
            if heard_on:
                assert lost == both, (ch, lost, both, break_only)
                for c in break_only:
                    assert c in breaks and c not in makes, (ch, c)
            else:
                assert lost == sorted(both + break_only), (ch, lost, both, break_only)
            assert 9 <= len(lost) <= 11 and len([i for i in incidents if i.channel == ch]) == 1, lost
            observed_by_break = set(break_only) if heard_on else set()
            rows = _measured_as_the_truth(store, bench, ru, {started[ch] - 1, *lost, *observed_by_break})
            for c in observed_by_break:  # its break, measured as the truth says
                mine = rows[rows["cycle"] == c]
                t = bench.truth.actuations
                t = t[(t["channel"] == ch) & (t["cycle"] == c) & (t["kind"] == BREAK)]
                assert mine["kind"].tolist() == [BREAK] and len(t) == 1, (ch, c, mine)
                np.testing.assert_allclose(mine["transit_us"], t["transit_us"], atol=2.5)
                np.testing.assert_allclose(mine["bounce_us"], t["bounce_us"], atol=2.5)
                np.testing.assert_array_equal(mine["bounce_count"], t["bounce_count"])
                assert not (mine["flags"] & NOT_MEASURED).any() and (mine["verdict"] != NO_VERDICT).all()
    finally:
        store.close()


def test_a_cycle_heard_between_two_outages_is_reported_lost_to_them(tmp_path):
    """Two pulls of a self-powered board's cable. The first (in cycle 31's on-phase) ends in cycle 40's
    off-phase: its drive-off was lost, so cycle 41's drive-on arrives after a drive-on and switches
    nothing in the analysis; the second pull (in cycle 41's on-phase) takes its drive-off. Cycle 41 was
    seen yet has no actuation: it must be reported not observed (the cycles the second pull hid are
    reported first, and must not hide it), as lost while the link was down, not as damaged records."""
    store = Store.open(str(tmp_path / "two.sqlite"))
    try:
        writer = start_run(store, CHANNELS, TARGET, "bench P")
        spec = load_spec("AG-MS5")
        rec = Recorder(writer, settings=spec.settings(), specs=dict.fromkeys(CHANNELS, spec))
        bench = Bench(demo_config(), 5)
        host = _Host(bench, rec, "line")
        host.run_to(3_030 * MS)
        host.cable_pull(950.0)  # back at 3,980 ms: cycle 40 switched off at 3,950.1 ms
        host.run_to(4_030 * MS)  # cycle 41 switched on at 4,000.1 ms, heard
        host.cable_pull(950.0)  # back at 4,980 ms: cycle 41 switched off at 4,050.1 ms
        end = bench.now_ns + 3 * TARGET * (ON_US + OFF_US) * 1000  # a ceiling in sampler time
        while not rec.target_reached() and bench.now_ns < end:
            host.run_to(bench.now_ns + 100 * MS)
        host.run_to(bench.now_ns + 500 * MS)
        rec.finish("target")

        truth = bench.truth
        assert not truth.resets and truth.cycles == dict.fromkeys(CHANNELS, TARGET), truth.cycles
        seen = check_cycles_against_truth(store, writer.run_id, truth.cycles)
        act = truth.actuations
        cut = 40  # 0-based: cycle 41
        for ch in CHANNELS:
            mine = act[(act["channel"] == ch) & (act["cycle"] == cut)]
            on = int(mine["t_drive_ns"][mine["kind"] == MAKE][0])
            off = int(mine["t_drive_ns"][mine["kind"] == BREAK][0])
            lost_in = [any(t0 <= t < t1 for t0, t1 in host.outages) for t in (on, off)]
            assert lost_in == [False, True], (ch, on, off, host.outages)  # the truth of the scenario
            makes, breaks, lost = seen[ch]
            assert cut in lost and cut not in makes and cut not in breaks, (ch, lost)
            why = [
                i.detail
                for i in store.incidents(writer.run_id, kind=CYCLES_NOT_OBSERVED)
                if i.channel == ch and f"cycle {cut} of the unit's life" in i.detail
            ]
            assert len(why) == 1 and "lost while the link was down" in why[0], why
    finally:
        store.close()
