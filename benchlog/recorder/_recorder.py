"""The recorder: a live feed through the analysis into the store, committed at least once a second.

```python
writer = store.start_run(bench_id, {0: unit_a, 1: unit_b}, profile=..., target_cycles=200_000)
rec = Recorder(writer, settings=AnalysisSettings(), specs={0: spec, 1: spec})
with Feed(url) as feed:
    rec.start(feed, on_us=50_000, off_us=50_000)
    reason = rec.run(feed, stop=threading.Event())
```
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime

import numpy as np

from benchlog.analysis import BREAK, FAIL, AnalysisSettings, Analyzer, judge
from benchlog.errors import PortError, StoreError
from benchlog.events import EVENT_COMMAND, Incident
from benchlog.store import (
    END_ALL_FAILED,
    END_IDLE,
    END_STOPPED,
    END_STORE_ERROR,
    END_TARGET,
    RunWriter,
)
from benchlog.wire import Go, GoAccepted, Halt, Plan

from ._count import SamplerCount
from ._drift import DriftWatch
from ._life import LifeJudge

FLUSH_EVERY_S = 0.5
# wall seconds a connected sampler has to answer GO (a GO-accepted record, or any drive record) before
# the plans and GO are sent again: a sampler answers within milliseconds, a loaded host may take seconds
ANSWER_S = 3.0


@dataclass(frozen=True, slots=True)
class Progress:
    run_id: int
    cycles_done: int
    target_cycles: int
    rate_cps: float
    eta_s: float | None
    incidents: int
    units: int
    failed: int
    actuations: int
    connected: bool

    def line(self) -> str:
        target = f"/{self.target_cycles:,}" if self.target_cycles else ""
        eta = "--" if self.eta_s is None else _hms(self.eta_s)
        link = "" if self.connected else "  PORT DOWN"
        return (
            f"run {self.run_id}: {self.cycles_done:,}{target} cycles  {self.rate_cps:6.1f} cycles/s  "
            f"ETA {eta}  incidents {self.incidents}  failed {self.failed}/{self.units}{link}"
        )


def _hms(seconds: float) -> str:
    if seconds > 99 * 86400:
        return ">99 days"
    s = int(round(seconds))
    return f"{s // 3600}:{s % 3600 // 60:02d}:{s % 60:02d}"


class Recorder:
    """Analysis, life status and batched writes for one run segment (see module doc)."""

    def __init__(
        self,
        writer: RunWriter,
        *,
        settings: AnalysisSettings | None = None,
        specs: dict[int, object] | None = None,
        fail_after: int = 5,
        flush_every_s: float = FLUSH_EVERY_S,
        keep_edges: bool = True,
        events=None,
        event_after_s: float = 30.0,
    ) -> None:
        self.writer = writer
        # the user's --on-event command (an EventCommand, or None): told of failures, a unit's first
        # actuation out of spec, a link down for `event_after_s`, the end of the run
        self.events = events
        self.event_after_s = float(event_after_s)
        self._told_spec: set[int] = set()  # channels whose first actuation out of spec was told
        self.specs = {c: sp for c, sp in (specs or {}).items() if sp is not None}
        self.analyzer = Analyzer(settings or AnalysisSettings())
        chatter = {}
        for c, sp in self.specs.items():
            lim = getattr(sp, "chatter", None)
            chatter[c] = None if lim is None else (int(lim.max_events), int(lim.per_cycles))
        self.life = LifeJudge(fail_after, chatter)
        for c, u in writer.units.items():  # units already failed or removed before this segment
            if writer.status.get(u) != "alive":
                self.life.retire(c)
        self.flush_every_s = min(float(flush_every_s), 1.0)
        self.keep_edges = keep_edges
        self.incidents = 0
        self.actuations = 0
        self._last_flush = time.monotonic()
        self.failures: list = []
        self.last_drive_at: float | None = None  # monotonic time of the latest drive record
        self.count = SamplerCount(writer)  # the sampler's own cycle count (protocol version 2)
        self._heard_ns = -(1 << 62)  # latest run time of a record heard (edges, drives, beats)
        self._profile: tuple[int, int] | None = None  # (on_us, off_us) of the plans sent
        self.pending: list = []  # commands to send the sampler (plans again after a reset)
        # a start owed an answer: the channels planned that no GO-accepted named and no drive record showed
        # cycling yet, and the monotonic time since which they are waited for (None: none waited for)
        self._awaiting: set[int] = set()
        self._awaiting_since: float | None = None
        self._start_cut = False  # the link went down while a start was owed: send all of it again
        self.starts_resent = 0  # plans and GO sent again because the sampler never answered them
        self._batch_at = datetime.now(UTC)  # host wall-clock time of the batch being judged
        # each living unit's trends judged for drift as their windows complete (the first flag is kept)
        self.drift = DriftWatch(writer, self.specs)
        self.drift_flags: list = []

    # -- what to send -------------------------------------------------------------------------------
    def plans(self, on_us: int, off_us: int):
        """One PLAN per channel of the run, for the cycles still to do (0 = endless)."""
        self._profile = (int(on_us), int(off_us))
        out = []
        target = self.writer.target_cycles
        for ch in sorted(self.writer.units):
            if self.writer.status.get(self.writer.units[ch]) != "alive":
                continue
            # every cycle begun counts, its rows written or not: after a reset the base holds the cycle it
            # cut short and the last ones before it, whose rows the analysis may still hold
            done = max(int(self.writer.cycles_done[ch]), self.count.started(ch) or 0)
            if target and done >= target:
                continue  # nothing due (a plan of 0 cycles would mean "until halted")
            left = 0 if not target else target - done
            out.append(Plan(ch, int(on_us), int(off_us), int(left)))
        return out

    def start(self, feed, on_us: int, off_us: int) -> None:
        """Queue the plans for the cycles still due and GO, and send what the port takes now.

        What the port refuses (the cable out just now) waits in `pending` for the recording loop. A
        start cut by a lost link, or whose GO a connected sampler leaves unanswered for `ANSWER_S`
        (commands lost with a cable pulled before the sampler read them, or damaged on the way), is sent
        again whole by `run`: a recording never waits forever on a bench that was not told to start."""
        self._profile = (int(on_us), int(off_us))
        self._queue_start()
        self.send_pending(feed)

    def _queue_start(self) -> None:
        plans = self.plans(*self._profile)  # type: ignore[misc]
        self.pending = [*plans, Go()]
        self._awaiting = {p.channel for p in plans}
        self._awaiting_since = time.monotonic() if self._awaiting else None
        self._start_cut = False

    # -- feeding ------------------------------------------------------------------------------------
    def push(self, timed) -> None:
        """One `Timed` batch from the feed (edges, drives, incidents)."""
        self._batch_at = datetime.now(UTC)  # the host's time of the batch: when its failures are judged
        if len(timed.drives):
            self.last_drive_at = time.monotonic()
        if self._awaiting:  # channels the sampler started (it said so, or they are cycling)
            self._awaiting.difference_update(np.unique(timed.drives.channel).tolist())
            for a in getattr(timed, "accepted", ()):
                if isinstance(a.record, GoAccepted):
                    self._awaiting.difference_update(a.record.channels)
            if not self._awaiting:
                self._awaiting_since = None
        until = None
        beats = getattr(timed, "beats", None)
        if beats is not None and len(beats):
            # a beat says the sampler's clock reached its tick: quiet channels can be finished too
            until = int(beats.t_ns.max()) - self.analyzer.settings.lateness_ns
        for t in (timed.edges.t_ns, timed.drives.t_ns, beats.t_ns if beats is not None else ()):
            if len(t):
                self._heard_ns = max(self._heard_ns, int(np.max(t)))
        unseen = self.count.push(timed)
        # a reset's drive-offs (the actuators went off with the power) are placed by the analysis
        rows, numbered = self.count.number(
            self.analyzer.push(timed.edges, timed.drives, timed.incidents, until_ns=until)
        )
        unseen += self.count.holes(rows, numbered)
        self._take(rows, timed.edges if self.keep_edges else None, list(timed.incidents) + unseen, numbered)
        if self.count.replan:
            self.count.replan = False
            if self._profile is not None and not self.target_reached():
                self._queue_start()  # the sampler reset and forgot its plans: the cycles still due, again

    def send_pending(self, feed) -> None:
        """Send the commands the recorder owes the sampler; those the port refuses wait for the next call."""
        while self.pending:
            try:
                feed.send(self.pending[0])
            except (PortError, OSError):
                return
            if isinstance(self.pending.pop(0), Go) and self._awaiting:
                self._awaiting_since = time.monotonic()  # the answer is waited for from now
            if self.last_drive_at is not None:
                self.last_drive_at = time.monotonic()  # a new plan: its first drive is yet to come

    def _answer_due(self, connected: bool, now: float) -> None:
        """Queue the plans and GO again when a start was cut by a lost link (some of it may have gone out
        and been lost with the cable), or when a connected sampler left channels of it unstarted for
        `ANSWER_S` (GO lost or damaged). A sampler that did hear it starts nothing twice: GO leaves
        cycling channels alone, and the plans are recomputed for the cycles still due."""
        if self._awaiting_since is None or self._profile is None:
            return
        if not connected:
            self._start_cut = True
            self._awaiting_since = now
        elif self._start_cut or (not self.pending and now - self._awaiting_since > ANSWER_S):
            if self.target_reached():
                self._awaiting, self._awaiting_since = set(), None
                return
            self.starts_resent += 1
            self._queue_start()

    def _take(self, rows: np.ndarray, edges, incidents, numbered: np.ndarray | None = None) -> None:
        if len(rows):
            rows = self._judge(rows)
            if self.events is not None and self.specs:
                self._tell_spec(rows)
            for f in self.life.push(rows):
                self._fail(f)
        self.incidents += len(incidents)
        self.actuations += len(rows)
        self.writer.add(actuations=rows, edges=edges, incidents=list(incidents), numbered=numbered)

    def _judge(self, rows: np.ndarray) -> np.ndarray:
        if not self.specs:
            return rows
        rows = rows.copy()
        for c, sp in self.specs.items():
            mask = rows["channel"] == c
            if mask.any():
                rows[mask] = judge(rows[mask], sp)
        return rows

    def _fail(self, f) -> None:
        unit = self.writer.units.get(f.channel)
        if unit is None or self.writer.status.get(unit) != "alive":
            return
        cycle = self.writer.life_cycle(f.channel, f.cycle)
        self.writer.mark_failed(unit, cycle, f.mode, f.detail, at=self._batch_at)
        self.failures.append(f)
        if self.events is not None:
            self.events.post("unit_failed", f.channel, cycle=cycle, mode=f.mode, detail=f.detail)

    def _tell_spec(self, rows: np.ndarray) -> None:
        """The event of each unit's first actuation failing its spec (once per unit and recording)."""
        bad = np.flatnonzero(rows["verdict"] == FAIL)
        if not len(bad):
            return
        chs, first = np.unique(rows["channel"][bad], return_index=True)
        for c, k in zip(chs.tolist(), bad[first].tolist(), strict=True):
            if c in self._told_spec or c not in self.specs:
                continue
            self._told_spec.add(c)
            row = rows[k]
            self.events.post(
                "spec_broken",
                c,
                cycle=self.writer.life_cycle(c, int(row["cycle"])),
                actuation="break" if int(row["kind"]) == BREAK else "make",
            )

    def _store_event_problems(self) -> None:
        """The --on-event command's failures so far, as incidents of the run (at the run time last heard)."""
        if self.events is None:
            return
        problems = self.events.take_problems()
        if not problems:
            return
        t = max(self._heard_ns, 0)
        incidents = [
            Incident(
                EVENT_COMMAND,
                t,
                t,
                p.host_start_ns,
                p.host_end_ns,
                channel=p.event.get("channel"),
                detail=f"{p.event.get('event')}: {p.detail}",
            )
            for p in problems
        ]
        self.incidents += len(incidents)
        self.writer.add(incidents=incidents)

    def _tell_store_error(self, exc: Exception) -> None:
        """The run's end by a store error, told (its queued events go first, for a bounded time); the
        command's failures cannot be stored now: they are said on standard error only."""
        if self.events is None:
            return
        self.events.post("run_ended", reason=END_STORE_ERROR, detail=str(exc), incidents=self.incidents)
        self.events.close(2 * self.events.timeout_s)
        self.events.take_problems()

    def maybe_flush(self, force: bool = False):
        now = time.monotonic()
        if force or now - self._last_flush >= self.flush_every_s:
            self._last_flush = now
            stats = self.writer.flush()
            self._judge_drift()
            return stats
        return None

    def _judge_drift(self) -> None:
        """The windows just committed, judged for drift; a unit's first flag is stored (next flush) and
        told."""
        for f in self.drift.push(self.writer.take_rollups()):
            self.writer.mark_drift(f.unit_id, f.metric, f.kind, f.cycle, at=datetime.now(UTC))
            self.drift_flags.append(f)
            if self.events is not None:
                self.events.post("drift_flagged", f.channel, cycle=f.cycle, metric=f.metric)

    # -- state --------------------------------------------------------------------------------------
    def target_reached(self) -> bool:
        target = self.writer.target_cycles
        if not target:
            return False
        alive = [c for c, u in self.writer.units.items() if self.writer.status.get(u) == "alive"]
        return bool(alive) and all(self.cycles_done(c) >= target for c in alive)

    def cycles_done(self, channel: int) -> int:
        """Run cycles done on `channel`: those written, or the sampler's own count once every record of
        its cycles is due (the analysis' lateness after it said so). The rows of the last cycles may wait
        for the end of data (its drive-off lost: the analysis measures a cycle when a later drive comes),
        where `finish` writes them or reports the cycles not observed."""
        done = int(self.writer.cycles_done[channel])
        said = self.count.reported(channel, self._heard_ns - self.analyzer.settings.lateness_ns)
        return done if said is None else max(done, said)

    def all_failed(self) -> bool:
        return not self.writer.alive_units()

    def progress(self, connected: bool = True) -> Progress:
        w = self.writer
        done = w.run_cycles_done()
        rate = max(w._rate, 0.0)
        eta = max(w.target_cycles - done, 0) / rate if w.target_cycles and rate > 0 else None
        failed = sum(1 for st in w.status.values() if st == "failed")
        return Progress(
            w.run_id,
            done,
            w.target_cycles,
            rate,
            eta,
            self.incidents,
            len(w.units),
            failed,
            self.actuations,
            connected,
        )

    # -- ending -------------------------------------------------------------------------------------
    def finish(self, reason: str, detail: str = "") -> None:
        """End of data: finish the analysis, judge the last cycles, write everything, end the run."""
        self._batch_at = datetime.now(UTC)
        # the data ran as long as the sampler's records say (its beats too): a last actuation that settled
        # before the end of them is measured, not cut short by the end of data
        heard = self._heard_ns + 1 if self._heard_ns >= 0 else None
        rows, numbered = self.count.number(self.analyzer.flush(until_ns=heard))
        self._take(rows, None, self.count.holes(rows, numbered), numbered)
        # cycles the sampler completed and the analysis measured nothing of: reported, and counted
        self._take(rows[:0], None, self.count.settle())
        for f in self.life.finish():
            self._fail(f)
        # the last windows (partial) are committed and judged for drift before the run ends
        self.writer.flush(final=True)
        self._judge_drift()
        if self.events is not None:
            w = self.writer
            failed = sum(1 for st in w.status.values() if st == "failed")
            self.events.post(
                "run_ended",
                reason=reason,
                cycles=w.run_cycles_done(),
                units=len(w.units),
                failed=failed,
                incidents=self.incidents,
            )
            # the events still queued go out, for a bounded time; those left are incidents of the run
            self.events.close(2 * self.events.timeout_s)
            self._store_event_problems()
        self.writer.close(reason, detail)

    def run(
        self,
        feed,
        stop: threading.Event | None = None,
        on_progress: Callable[[Progress], None] | None = None,
        progress_every_s: float = 1.0,
        grace_s: float = 0.5,
        idle_s: float = 10.0,
    ) -> str:
        """Record from `feed` until the target, every unit failing, or `stop`; returns the end reason.

        `idle_s`: with a cycle target, no drive record for this long while connected means the sampler
        has finished its plan although the target was not seen (cycles lost in an outage): END_IDLE.

        A StoreError (disk full, read-only database, lost lease) stops the recording: the run is left
        as it was at its last commit (resumable) and the error is raised again."""
        stop = stop or threading.Event()
        last_progress = 0.0
        ending_at: float | None = None
        reason = END_STOPPED
        down_since: float | None = None  # monotonic time the link went down (None: up)
        told_down = False
        try:
            while True:
                try:
                    timed = feed.poll(0.05)
                except PortError:
                    timed = None
                if timed is not None:
                    self.push(timed)
                if self.pending:
                    self.send_pending(feed)
                self.maybe_flush()
                now = time.monotonic()
                connected = getattr(feed, "connected", True)
                if self.last_drive_at is not None and not connected:
                    self.last_drive_at = now  # the sampler's silence counts from the reconnection
                self._answer_due(connected, now)
                if self.events is not None:
                    if connected:
                        down_since, told_down = None, False
                    elif down_since is None:
                        down_since = now
                    elif not told_down and now - down_since >= self.event_after_s:
                        told_down = True
                        self.events.post("link_lost", down_s=round(now - down_since, 1))
                    self._store_event_problems()
                if on_progress and now - last_progress >= progress_every_s:
                    last_progress = now
                    on_progress(self.progress(getattr(feed, "connected", True)))
                if ending_at is None:
                    if self.all_failed():
                        reason, ending_at = END_ALL_FAILED, now
                    elif self.target_reached():
                        reason, ending_at = END_TARGET, now + grace_s  # let the last break arrive
                    elif stop.is_set():
                        reason, ending_at = END_STOPPED, now
                    elif (
                        self.writer.target_cycles
                        and self.last_drive_at is not None
                        and getattr(feed, "connected", True)
                        and now - self.last_drive_at > idle_s
                    ):
                        # connected, yet no actuator switched for a long while: the sampler finished
                        # its plan while some of its cycles were lost (see the run's incidents)
                        reason, ending_at = END_IDLE, now
                if ending_at is not None and now >= ending_at:
                    break
        except KeyboardInterrupt:
            reason = END_STOPPED
        except StoreError as exc:
            self.writer.abandon()
            self._tell_store_error(exc)
            raise
        _halt(feed)
        try:
            self.finish(reason)
        except StoreError as exc:
            self.writer.abandon()
            self._tell_store_error(exc)
            raise
        if on_progress:
            on_progress(self.progress(getattr(feed, "connected", True)))
        return reason


def _halt(feed) -> None:
    try:
        feed.send(Halt())
    except (PortError, OSError, AttributeError):
        pass


__all__ = ["Recorder", "Progress", "END_STORE_ERROR"]
