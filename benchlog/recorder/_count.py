"""The sampler keeps the count (protocol version 2): a unit's run cycles come from the sampler.

The sampler numbers each drive record with the cycle of its channel's plan (1 = the first after GO) and
each beat carries, per channel, the cycles completed since the plan started. The host keeps, per
channel, `base`: the run cycles done when the sampler's current plan started (kept in the store, so a
resumed recorder knows it), and turns the sampler's numbers into run cycles: cycle `c` of the plan is
run cycle `base + c - 1` (0-based), and a count `n` means `base + n` run cycles done.

- Actuations are numbered by the drive that started them, so cycles the host never saw (an outage, a
  recorder that was down, damaged drive records) leave a gap in the numbers instead of shifting the
  cycles after them.
- A cycle is observed when its make or its break (or both) is measured; a gap is the cycles with
  neither, a CYCLES_NOT_OBSERVED incident per unit with how many cycles it stands for. Those cycles
  count in the unit's life (the writer's `cycles_done`) but carry no measurement. Cycles the host did
  see count when their actuations are written, so what the store says is always backed by a measurement
  or by an incident, never by both; a recorder killed before a commit leaves cycles the next one reports
  as a gap.
- A break-only cycle: its drive-on was lost (an outage ended within its on-phase, or the record was
  damaged) and its drive-off arrived. The analysis switches only on a change of the drive level heard
  (`_level`): after a drive-on of an earlier cycle (its drive-off lost too), or with no drive heard yet,
  the lone drive-off starts a break, numbered with its cycle: the cycle is observed by its break alone
  (a break row, no make row) and is not in the gap. After a drive-off (an outage that began in an
  off-phase) it repeats the level and starts nothing, and the cycle's make edges were lost: it is not
  observed, and goes in the same gap as the cycles before it.
- A sampler reset ends the plan (its count starts again from 0): the run cycles done so far become the
  base, and the recorder plans the cycles still due again (`replan`, `started`). A cycle whose drive-on
  was heard and whose drive-off was not (power failed within it) is done: its coil was energised. Its
  actuator went off with the power: the analysis places a drive-off just after the last record heard
  before the reset (`power_off_ns`), and the break it starts is numbered with the cycle here; its make
  and break overlap the reset and are not measured, and the first drive-on of the new plan starts a make
  again, from the contact's level after the reset.
- A cycle whose drive records were damaged may get no actuation row although its drive-on arrived (the
  analysis measures from drive to drive: a lost drive-off merges the cycle with the next one, and the
  last drive of a channel is measured only when a later one comes, or at the end of data). Such cycles
  are reported not observed too: when a later cycle's rows are numbered (`holes`), and at the end of
  data up to the sampler's own count (`settle`), so a unit's life count ends equal to the sampler's.
  Their incident says why by what lay between the records heard around them: an outage of the link or a
  sampler reset (records lost with it), or else damaged records.
- `reported`: the run cycles the sampler says a channel completed; the recorder's target is reached on
  it (rows of the last cycle may wait for the end of data, see above).
"""

from __future__ import annotations

from collections import deque

import numpy as np

from benchlog.analysis import power_off_ns
from benchlog.events import CYCLES_NOT_OBSERVED, DISCONNECT, RESET, Incident
from benchlog.wire import GoAccepted

KEEP_DRIVES = 8192  # recent drives per channel kept to number the actuations they start
KEEP_OUTAGES = 64  # recent outages and resets kept to tell why a cycle has no actuation
_LOST_DRIVES = ": no actuation measured, its drive records were damaged"
_LOST_IN_OUTAGE = ": no actuation measured, its records were lost while the link was down"
_LOST_IN_RESET = ": no actuation measured, its records were lost with the sampler's reset"


class _DriveLog:
    """A channel's recent drives, (run time, run cycle index), the last KEEP_DRIVES of them; `arrays()`
    gives them in time order as numpy arrays, made again only after new drives arrived (the recorder
    numbers every batch's actuations with them)."""

    def __init__(self) -> None:
        self._new: list[tuple[int, int]] = []
        self._t = np.zeros(0, np.int64)
        self._k = np.zeros(0, np.int64)

    def append(self, drive: tuple[int, int]) -> None:
        self._new.append(drive)

    def __bool__(self) -> bool:
        return bool(self._new) or bool(len(self._t))

    def __iter__(self):
        t, k = self.arrays()
        return zip(t.tolist(), k.tolist(), strict=True)

    def arrays(self) -> tuple[np.ndarray, np.ndarray]:
        if self._new:
            new = np.array(self._new, np.int64).reshape(-1, 2)
            self._new = []
            t = np.concatenate([self._t, new[:, 0]])[-KEEP_DRIVES:]
            k = np.concatenate([self._k, new[:, 1]])[-KEEP_DRIVES:]
            if len(t) > 1 and (np.diff(t) < 0).any():  # a reset's power-off time may come out of order
                order = np.argsort(t, kind="stable")
                t, k = t[order], k[order]
            self._t, self._k = t, k
        return self._t, self._k


class SamplerCount:
    """Follows the sampler's count for the channels of one run segment (see the module doc)."""

    def __init__(self, writer) -> None:
        self.writer = writer
        self.base: dict[int, int | None] = dict(writer.sampler_base)
        self.count: dict[int, int] = {}
        self.seen: dict[int, int] = {}  # highest plan cycle whose drive-on arrived (or reported lost)
        for ch in writer.units:
            b = self.base.get(ch)
            if b is not None:
                done = max(0, int(writer.cycles_done[ch]) - b)
                self.count[ch] = self.seen[ch] = done
        self._drives: dict[int, _DriveLog] = {}  # channel -> (t_ns, run cycle index) of recent drives
        self._first_drive: dict[int, int] = {}  # channel -> time of its first numbered drive heard
        self._count_at: dict[int, int] = {}  # channel -> run time at which `count` last changed
        self._t_last = 0  # latest run time of a counted event, and its host time (for incidents)
        self._host_last = 0
        self.replan = False  # a reset ended the sampler's plans: plan the cycles still due again
        self._on: dict[int, int] = {}  # channel -> run cycle of a drive-on heard with no drive after it
        # channel -> level of the last drive heard, as the analysis switches on it (a reset's power loss
        # is a drive-off); no entry: none heard yet in this segment
        self._level: dict[int, int] = {}
        # recent outages of the link and resets: (run time start, end, kind), in arrival order
        self._outages: deque[tuple[int, int, str]] = deque(maxlen=KEEP_OUTAGES)
        # channel -> run cycles before it each measured (a numbered row) or reported not observed; and
        # the run cycles reported not observed from it on, (lo, hi) spans. A gap reported beyond cycles
        # whose rows are still due must not pass them by: a seen cycle may yet get no row (`holes`)
        self._accounted: dict[int, int] = {ch: int(writer.cycles_done[ch]) for ch in writer.units}
        self._reported: dict[int, list[tuple[int, int]]] = {}
        self.not_observed = 0

    # -- feeding ------------------------------------------------------------------------------------
    def push(self, timed) -> list[Incident]:
        """Take the counts, drives, acknowledgements and resets of one batch, in run-time order."""
        events: list[tuple[int, int, object]] = []
        for inc in timed.incidents:
            if inc.kind == RESET:
                events.append((int(inc.t_end_ns), 0, inc))
            if inc.kind in (RESET, DISCONNECT):
                self._outages.append((int(inc.t_start_ns), int(inc.t_end_ns), inc.kind))
        for acc in getattr(timed, "accepted", ()):
            if isinstance(acc.record, GoAccepted):
                events.append((acc.t_ns, 1, acc))
        d = timed.drives
        cyc = getattr(d, "cycle", None)
        if cyc is not None and len(d):
            for t, ch, lv, c in zip(
                d.t_ns.tolist(), d.channel.tolist(), d.level.tolist(), cyc.tolist(), strict=True
            ):
                if c >= 0:
                    events.append((t, 2, (ch, lv, c)))
        for cnt in getattr(timed, "counts", ()):
            events.append((cnt.t_ns, 3, cnt))
        if not events:
            return []
        events.sort(key=lambda e: (e[0], e[1]))
        out: list[Incident] = []
        host = item_host(timed)
        for t, kind, item in events:
            if kind == 0:
                self._reset(power_off_ns(item), t)  # type: ignore[arg-type]
            elif kind == 1:
                self._go(t, item.record.channels)  # type: ignore[attr-defined]
            elif kind == 2:
                ch, lv, c = item  # type: ignore[misc]
                self._drive(t, ch, lv, c, host, out)
            else:
                for ch, n in item.cycles:  # type: ignore[attr-defined]
                    self._counted(t, ch, n, item.host_ns, out)  # type: ignore[attr-defined]
        self._t_last = max(self._t_last, events[-1][0])
        self._host_last = host
        return out

    def _reset(self, off: int, t: int) -> None:
        """The sampler lost power at run time `off` and restarted by `t`."""
        for ch, k in sorted(self._on.items()):  # the power went, and the actuator with it
            self._drives.setdefault(ch, _DriveLog()).append((off, k))
        self._on.clear()
        for ch in self._level:
            self._level[ch] = 0
        for ch in list(self.base):
            b = self.base[ch]
            if b is not None:  # a cycle the host saw start counts (power may fail before its drive-off)
                self.base[ch] = b + max(self.count.get(ch, 0), self.seen.get(ch, 0))
                self.writer.sampler_base[ch] = self.base[ch]
            self.count[ch] = self.seen[ch] = 0
            self._count_at[ch] = t
        self.replan = True

    def _go(self, t: int, channels: tuple[int, ...]) -> None:
        for ch in channels:
            if ch not in self.writer.units:
                continue
            b = self.base.get(ch)
            done = int(self.writer.cycles_done[ch]) if b is None else b + self.count.get(ch, 0)
            self.base[ch] = done
            self.writer.sampler_base[ch] = done
            self.count[ch] = self.seen[ch] = 0
            self._count_at[ch] = t

    def _ensure_base(self, t: int, ch: int, counted: int) -> int | None:
        """The base of a channel the host saw no GO for (acknowledgement lost): assume no gap."""
        b = self.base.get(ch)
        if b is None and ch in self.writer.units:
            b = max(0, int(self.writer.cycles_done[ch]) - counted)
            self.base[ch] = b
            self.writer.sampler_base[ch] = b
            self.count[ch] = self.seen[ch] = counted
            self._count_at[ch] = t
        return b

    def _drive(self, t: int, ch: int, level: int, c: int, host_ns: int, out: list[Incident]) -> None:
        b = self._ensure_base(t, ch, max(c - 1, 0))
        if b is None:
            return
        seen = self.seen.get(ch, 0)
        # a cycle is seen when its drive-on arrives. A drive-off alone (its drive-on lost) is a break-only
        # cycle, observed by the break it starts, unless it repeats the level heard: then the analysis
        # measures nothing from it, and the cycle goes with the cycles not observed before it
        upto = c - 1 if level or self._level.get(ch, 1) else c
        self._level[ch] = 1 if level else 0
        if upto > seen:
            self._gap(t, ch, b + seen, b + upto, host_ns, out)
        self.seen[ch] = max(seen, c)
        self._first_drive.setdefault(ch, t)
        q = self._drives.setdefault(ch, _DriveLog())
        q.append((t, b + c - 1))
        if level:
            self._on[ch] = b + c - 1
        else:
            self._on.pop(ch, None)
            self._completed(t, ch, c)

    def _counted(self, t: int, ch: int, n: int, host_ns: int, out: list[Incident]) -> None:
        b = self._ensure_base(t, ch, n)
        if b is None:
            return
        seen = self.seen.get(ch, 0)
        if n > seen:
            self._gap(t, ch, b + seen, b + n, host_ns, out)
            self.seen[ch] = n
        self._completed(t, ch, n)

    def _completed(self, t: int, ch: int, n: int) -> None:
        if n > self.count.get(ch, 0):
            self.count[ch] = n
            self._count_at[ch] = t

    def _gap(
        self, t: int, ch: int, lo: int, hi: int, host_ns: int, out: list[Incident], why: str = ""
    ) -> None:
        """Run cycles lo .. hi - 1 (0-based) happened without the host measuring them."""
        k = hi - lo
        if k <= 0 or ch not in self.writer.units:
            return
        self.not_observed += k
        self._reported.setdefault(ch, []).append((lo, hi))
        # they count in the unit's life; the cycles seen count as their actuations are written
        self.writer.cycles_done[ch] = max(self.writer.cycles_done[ch], hi)
        first = self.writer.cycle_base[ch] + lo  # life cycles numbered from 0, as actuations are
        last = first + k - 1
        span = f"cycle {first:,}" if k == 1 else f"cycles {first:,}-{last:,}"
        out.append(
            Incident(
                CYCLES_NOT_OBSERVED,
                t,
                t,
                host_ns,
                host_ns,
                channel=ch,
                cycles_lost=k,
                detail=f"{k:,} cycle(s) of channel {ch} not observed ({span} of the unit's life){why}",
            )
        )

    # -- what the sampler reported --------------------------------------------------------------------
    def started(self, ch: int) -> int | None:
        """Run cycles channel `ch` has begun: those the sampler counted, and one whose drive-on was heard
        and whose drive-off was not (a reset cut it short; its coil was energised, so it counts). None:
        no plan of this run heard on it. After a reset this is the base, while the rows of the last cycles
        before it may not be written yet (the analysis' lateness; the cut cycle's come with the next
        drive): the writer's `cycles_done` can be a few cycles behind it then."""
        b = self.base.get(ch)
        if b is None:
            return None
        return b + max(self.count.get(ch, 0), self.seen.get(ch, 0))

    def reported(self, ch: int, by_ns: int) -> int | None:
        """Run cycles the sampler has said channel `ch` completed, as it said so at or before run time
        `by_ns` (None: no count of this plan heard, or only later)."""
        b = self.base.get(ch)
        if b is None or self._count_at.get(ch, by_ns + 1) > by_ns:
            return None
        return b + self.count.get(ch, 0)

    def holes(self, rows: np.ndarray, numbered: np.ndarray) -> list[Incident]:
        """Cycles before the numbered rows of `rows` (from `number`, not yet written) that have no row
        and were not reported: records of theirs were lost (damaged, or with an outage or a reset), so
        the analysis measured no actuation for them (rows come per channel in cycle order). They are
        reported not observed, with the cause (`_why`)."""
        out: list[Incident] = []
        sel = numbered.copy()
        if not sel.any():
            return out
        for ch in np.unique(rows["channel"][sel]).tolist():
            if ch not in self.writer.units:
                continue
            mine = rows[sel & (rows["channel"] == ch)]
            run_cycle = mine["cycle"].astype(np.int64) + self.writer.seg_start[ch]
            cycles, first = np.unique(run_cycle, return_index=True)
            start = self._accounted.get(ch, 0)  # every cycle before it is measured or reported
            for b, i in zip(cycles.tolist(), first.tolist(), strict=True):
                if b > start:  # reported at the start of the first cycle measured after them
                    t = int(mine["t_start_ns"][i])
                    for lo, hi in self._unreported(ch, start, b):
                        self._gap(t, ch, lo, hi, self._host_last, out, self._why(ch, lo, t))
                start = max(start, b + 1)
            self._accounted[ch] = start
            self._reported[ch] = [(lo, hi) for lo, hi in self._reported.get(ch, ()) if hi > start]
        return out

    def _unreported(self, ch: int, lo: int, hi: int) -> list[tuple[int, int]]:
        """The spans of run cycles lo .. hi - 1 of channel `ch` not reported not observed yet."""
        out = []
        for a, b in sorted(self._reported.get(ch, ())):
            if b <= lo or a >= hi:
                continue
            if a > lo:
                out.append((lo, a))
            lo = max(lo, b)
        if hi > lo:
            out.append((lo, hi))
        return out

    def _why(self, ch: int, first: int, t_after: int) -> str:
        """Why run cycles from `first` of channel `ch` have no actuation, the next record measured being
        at run time `t_after`: an outage of the link or a reset between the last drive heard of an
        earlier cycle and then lost their records with it; else their drive records were damaged."""
        t_before = max((t for t, k in self._drives.get(ch, ()) if k < first), default=None)
        kinds = {
            kind for t0, t1, kind in self._outages if t0 <= t_after and (t_before is None or t1 >= t_before)
        }
        if RESET in kinds:
            return _LOST_IN_RESET
        return _LOST_IN_OUTAGE if DISCONNECT in kinds else _LOST_DRIVES

    def settle(self) -> list[Incident]:
        """End of data, once the analysis' last rows are written: the cycles the sampler reported
        completed beyond the last one measured have no measurement (their records were lost: damaged,
        or with an outage or a reset); they are reported not observed, so each unit's life count is the
        sampler's."""
        out: list[Incident] = []
        for ch in self.writer.units:
            n = self.reported(ch, self._t_last)
            if n is None:
                continue
            for lo, hi in self._unreported(ch, self._accounted.get(ch, 0), n):
                self._gap(self._t_last, ch, lo, hi, self._host_last, out, self._why(ch, lo, self._t_last))
        return out

    # -- numbering ----------------------------------------------------------------------------------
    def number(self, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Actuation rows renumbered by the sampler's cycle of the drive that started them (rows whose
        drive carried no cycle keep the analysis' number), and which rows were (for `RunWriter.add`).

        Rows before a channel's first numbered drive (a recorder that started listening within a
        cycle: the contact's edges with no drive-on before them) are dropped: they belong to a cycle
        whose drive-on the host did not see, which is reported not observed (their edges are kept)."""
        numbered = np.zeros(len(rows), bool)
        if not len(rows) or not self._drives:
            return rows, numbered
        early = np.zeros(len(rows), bool)
        for ch, t0 in self._first_drive.items():
            early |= (rows["channel"] == ch) & (rows["t_start_ns"] < t0)
        if early.any():
            rows, numbered = rows[~early], numbered[~early]
        rows = rows.copy()
        for ch, q in self._drives.items():
            sel = np.flatnonzero(rows["channel"] == ch)
            if not len(sel) or not q:
                continue
            t, run_cycle = q.arrays()
            at = rows["t_start_ns"][sel]
            i = np.clip(np.searchsorted(t, at), 0, len(t) - 1)
            hit = t[i] == at
            rows["cycle"][sel[hit]] = run_cycle[i[hit]] - self.writer.seg_start[ch]
            numbered[sel[hit]] = True
        return rows, numbered


def item_host(timed) -> int:
    """A host time for incidents found in a batch: its latest beat's, or now in the batch's terms."""
    b = timed.beats
    if len(b):
        return int(b.host_ns.max())
    import time

    return time.time_ns()


__all__ = ["SamplerCount", "KEEP_DRIVES"]
