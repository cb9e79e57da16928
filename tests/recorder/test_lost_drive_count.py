"""Drive records damaged on the wire near the end of a plan cost measurements, never cycles: every unit's
life count equals the sampler's, each cycle is measured or reported not observed (never both), and the
run ends on its target.

Ground truth is the simulator's own record (`Truth.cycles`: cycles whose actuator it switched on). The
simulated sampler is driven directly, not through a pty: its records go through the real packed encoder,
the frames of the chosen drive records get one bit flipped (their CRC fails, as byte damage on a line
does), and the real decoder and timeline make what the recorder hears. Host time follows sampler time,
so which records are lost is decided by the test, not by the machine's load; `Recorder.run` decides
how the run ends.
"""

from __future__ import annotations

import re
import threading

import pytest

from benchlog.analysis import load_spec
from benchlog.clock import Timeline
from benchlog.events import CYCLES_NOT_OBSERVED
from benchlog.recorder import Recorder
from benchlog.sim import Bench
from benchlog.store import Store
from benchlog.wire import Decoder, Drive, Go
from tests.conftest import HANG_S
from tests.recorder._helpers import demo_config, start_run

MS = 1_000_000
ON_US = OFF_US = 50_000
TARGET = 60
CHANNELS = (0, 1)


class _DirectFeed:
    """The shape of `benchlog.ingest.Feed` over a `Bench` in this process: each poll runs the sampler
    `step_ms` further, encodes what it sent, damages the frames of the records `lose` picks, decodes
    the bytes and places the records in run time (host time = sampler time)."""

    connected = True

    def __init__(self, bench: Bench, lose, step_ms: int = 20) -> None:
        self.bench, self.lose, self.step_ns = bench, lose, step_ms * MS
        self.timeline = Timeline()
        self.decoder = Decoder()
        self.lost: list[Drive] = []
        self._replies: list = []

    def send(self, cmd) -> None:
        self._replies += self.bench.command(cmd)

    def start_cycling(self, plans) -> None:
        for plan in plans:
            self.send(plan)
        self.send(Go())

    def poll(self, timeout: float = 0.0):
        records, self._replies = self._replies, []
        t = self.bench.now_ns + self.step_ns
        records += self.bench.advance_to(t)
        data = b""
        for rec in records:
            frame = self.bench.encode([rec])
            if self.lose(rec):
                self.lost.append(rec)
                damaged = bytearray(frame)
                damaged[len(frame) // 2] ^= 0x10  # one bit flipped: the frame's CRC fails
                frame = bytes(damaged)
            data += frame
        return self.timeline.push(self.decoder.feed(data), self.bench.now_ns)


def _drive(ch: int, level: int | None, cycle: int):
    def pick(rec) -> bool:
        return (
            isinstance(rec, Drive)
            and rec.channel == ch
            and rec.cycle == cycle
            and (level is None or rec.level == level)
        )

    return pick


CASES = {
    # the last cycle's make is withheld by the analysis until a later drive of its channel: none comes
    "last-drive-off": [_drive(0, 0, TARGET)],
    # the analysis takes the last drive-on as no switching (the drive before it was also 'on'); the last
    # break, numbered by its drive-off, is withheld as the last drive of its channel
    "drive-off-before-the-last": [_drive(1, 0, TARGET - 1)],
    # both: the last cycle has no measurement at all, though its drive-on arrived
    "last-two-drive-offs": [_drive(0, 0, TARGET - 1), _drive(0, 0, TARGET)],
    # two drive-offs in a row lost mid-run: the cycle between them has no actuation measured (the
    # analysis takes its drive-on and the next one as no switching); later cycles' rows come
    "two-drive-offs-mid-run": [_drive(1, 0, TARGET // 2), _drive(1, 0, TARGET // 2 + 1)],
    "last-drive-on": [_drive(0, 1, TARGET)],
    "last-cycle-both-drives": [_drive(1, None, TARGET)],
}


@pytest.mark.parametrize("picks", CASES.values(), ids=CASES.keys())
def test_lost_drive_records_at_the_end_cost_no_cycle(tmp_path, picks):
    with Store.open(str(tmp_path / "lost.sqlite")) as store:
        writer = start_run(store, CHANNELS, TARGET, "bench D")
        spec = load_spec("AG-MS5")
        rec = Recorder(writer, settings=spec.settings(), specs=dict.fromkeys(CHANNELS, spec))
        bench = Bench(demo_config().with_sampler(form="packed"), 5)
        feed = _DirectFeed(bench, lambda r: any(p(r) for p in picks))
        feed.start_cycling(rec.plans(ON_US, OFF_US))
        stop = threading.Event()
        ceiling = threading.Timer(HANG_S, stop.set)  # only a hang reaches it
        ceiling.start()
        try:
            reason = rec.run(feed, stop, grace_s=0.3)
        finally:
            ceiling.cancel()
        assert all(any(p(r) for r in feed.lost) for p in picks)  # each chosen record was sent, damaged
        assert reason == "target"

        truth = bench.truth.cycles
        reported = _reported(store, writer.run_id)
        for ru in store.run_units(writer.run_id):
            ch = ru.channel
            assert truth[ch] == TARGET  # the sampler ran its plan once, to the end
            assert (ru.cycles_done, ru.unit.cycles) == (TARGET, TARGET), ch
            measured = set(store.actuations(units=[ru.unit.id])["cycle"].tolist())
            gaps = reported.get(ch, [])
            assert len(gaps) == len(set(gaps))  # no cycle reported twice
            assert measured.isdisjoint(gaps), (ch, sorted(measured & set(gaps)))
            assert measured | set(gaps) == set(range(TARGET)), (ch, sorted(set(range(TARGET)) - measured))
        # no outage and no reset: a cycle with no actuation is put down to its damaged drive records
        for inc in store.incidents(writer.run_id, kind=CYCLES_NOT_OBSERVED):
            assert "link was down" not in inc.detail and "reset" not in inc.detail, inc.detail


def _reported(store, run_id: int) -> dict[int, list[int]]:
    """Channel -> the life cycles its CYCLES_NOT_OBSERVED incidents name."""
    out: dict[int, list[int]] = {}
    for inc in store.incidents(run_id, kind=CYCLES_NOT_OBSERVED):
        m = re.search(r"\(cycles? ([\d,]+)(?:-([\d,]+))? of the unit's life\)", inc.detail)
        assert m, inc.detail
        first = int(m.group(1).replace(",", ""))
        last = int((m.group(2) or m.group(1)).replace(",", ""))
        assert last - first + 1 == inc.cycles_lost
        out.setdefault(inc.channel, []).extend(range(first, last + 1))
    return out
