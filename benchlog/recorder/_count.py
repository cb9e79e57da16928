"""The sampler keeps the count (protocol version 2): a unit's run cycles come from the sampler.

The sampler numbers each drive record with the cycle of its channel's plan (1 = the first after GO) and
each beat carries, per channel, the cycles completed since the plan started. The host keeps, per
channel, `base`: the run cycles done when the sampler's current plan started (kept in the store, so a
resumed recorder knows it), and turns the sampler's numbers into run cycles: cycle `c` of the plan is
run cycle `base + c - 1` (0-based), and a count `n` means `base + n` run cycles done.

- Actuations are numbered by the drive that started them, so cycles the host never saw (an outage, a
  recorder that was down, damaged drive records) leave a gap in the numbers instead of shifting the
  cycles after them.
- A gap is a CYCLES_NOT_OBSERVED incident per unit with how many cycles it stands for; those cycles
  count in the unit's life (the writer's `cycles_done`) but carry no measurement. Cycles the host did
  see count when their actuations are written, so what the store says is always backed by a measurement
  or by an incident; a recorder killed before a commit leaves cycles the next one reports as a gap.
- A sampler reset ends the plan (its count starts again from 0): the run cycles done so far become the
  base, and the recorder plans the cycles still due again (`replan`).
"""

from __future__ import annotations

from collections import deque

import numpy as np

from benchlog.events import CYCLES_NOT_OBSERVED, RESET, Incident
from benchlog.wire import GoAccepted

KEEP_DRIVES = 8192  # recent drives per channel kept to number the actuations they start


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
        self._drives: dict[int, deque[tuple[int, int]]] = {}  # channel -> (t_ns, run cycle index)
        self._first_drive: dict[int, int] = {}  # channel -> time of its first numbered drive heard
        self.replan = False  # a reset ended the sampler's plans: plan the cycles still due again
        self.not_observed = 0

    # -- feeding ------------------------------------------------------------------------------------
    def push(self, timed) -> list[Incident]:
        """Take the counts, drives, acknowledgements and resets of one batch, in run-time order."""
        events: list[tuple[int, int, object]] = []
        for inc in timed.incidents:
            if inc.kind == RESET:
                events.append((int(inc.t_end_ns), 0, inc))
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
        for t, kind, item in events:
            if kind == 0:
                self._reset()
            elif kind == 1:
                self._go(item.record.channels)  # type: ignore[attr-defined]
            elif kind == 2:
                ch, lv, c = item  # type: ignore[misc]
                self._drive(t, ch, lv, c, item_host(timed), out)
            else:
                for ch, n in item.cycles:  # type: ignore[attr-defined]
                    self._counted(t, ch, n, item.host_ns, out)  # type: ignore[attr-defined]
        return out

    def _reset(self) -> None:
        for ch in list(self.base):
            b = self.base[ch]
            if b is not None:  # a cycle the host saw start counts (power may fail before its drive-off)
                self.base[ch] = b + max(self.count.get(ch, 0), self.seen.get(ch, 0))
                self.writer.sampler_base[ch] = self.base[ch]
            self.count[ch] = self.seen[ch] = 0
        self.replan = True

    def _go(self, channels: tuple[int, ...]) -> None:
        for ch in channels:
            if ch not in self.writer.units:
                continue
            b = self.base.get(ch)
            done = int(self.writer.cycles_done[ch]) if b is None else b + self.count.get(ch, 0)
            self.base[ch] = done
            self.writer.sampler_base[ch] = done
            self.count[ch] = self.seen[ch] = 0

    def _ensure_base(self, ch: int, counted: int) -> int | None:
        """The base of a channel the host saw no GO for (acknowledgement lost): assume no gap."""
        b = self.base.get(ch)
        if b is None and ch in self.writer.units:
            b = max(0, int(self.writer.cycles_done[ch]) - counted)
            self.base[ch] = b
            self.writer.sampler_base[ch] = b
            self.count[ch] = self.seen[ch] = counted
        return b

    def _drive(self, t: int, ch: int, level: int, c: int, host_ns: int, out: list[Incident]) -> None:
        b = self._ensure_base(ch, max(c - 1, 0))
        if b is None:
            return
        seen = self.seen.get(ch, 0)
        # a cycle is seen when its drive-on arrives: a drive-off alone means its drive-on was lost
        upto = c - 1 if level else c
        if upto > seen:
            self._gap(t, ch, b, seen, upto, host_ns, out)
        self.seen[ch] = max(seen, c)
        self._first_drive.setdefault(ch, t)
        q = self._drives.setdefault(ch, deque(maxlen=KEEP_DRIVES))
        q.append((t, b + c - 1))
        if level == 0:
            self._completed(ch, c)

    def _counted(self, t: int, ch: int, n: int, host_ns: int, out: list[Incident]) -> None:
        b = self._ensure_base(ch, n)
        if b is None:
            return
        seen = self.seen.get(ch, 0)
        if n > seen:
            self._gap(t, ch, b, seen, n, host_ns, out)
            self.seen[ch] = n
        self._completed(ch, n)

    def _completed(self, ch: int, n: int) -> None:
        if n > self.count.get(ch, 0):
            self.count[ch] = n

    def _gap(self, t: int, ch: int, b: int, seen: int, upto: int, host_ns: int, out: list[Incident]) -> None:
        """Plan cycles seen+1 .. upto happened without the host seeing them."""
        k = upto - seen
        if k <= 0 or ch not in self.writer.units:
            return
        self.not_observed += k
        # they count in the unit's life; the cycles seen count as their actuations are written
        self.writer.cycles_done[ch] = max(self.writer.cycles_done[ch], b + upto)
        first = self.writer.cycle_base[ch] + b + seen  # life cycles numbered from 0, as actuations are
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
                detail=f"{k:,} cycle(s) of channel {ch} not observed ({span} of the unit's life)",
            )
        )

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
            t = np.fromiter((x[0] for x in q), np.int64, len(q))
            run_cycle = np.fromiter((x[1] for x in q), np.int64, len(q))
            order = np.argsort(t, kind="stable")
            t, run_cycle = t[order], run_cycle[order]
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
