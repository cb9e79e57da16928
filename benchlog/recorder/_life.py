"""Deciding when a unit has failed, from the actuations the analysis reports.

The rule (docs/store.md, "Life status"):

- Each cycle of a unit gets one sign from its make and break:
  - `welded`: the break is flagged STUCK or MISSED (the contact would not open);
  - `missed_make`: the make is flagged STUCK or MISSED (the contact would not close);
  - `neutral`: nothing measurable (every row INCOMPLETE, or NO_CHANGE: driven while the contact
    already sat in the expected state, which is how the other half of a welded or missed cycle shows);
  - `clean` otherwise (a cycle with chatter included). Precedence: welded > missed_make > clean >
    neutral.
- A unit fails by a weld or a missed make when `fail_after` consecutive cycles (neutral ones skipped,
  gaps in the cycle numbers ignored) carry the same sign; it is recorded as failed at the *first*
  cycle of that streak with that mode. A clean cycle, or the other sign, restarts the count.
- A unit fails by chatter when its chatter goes over the spec's allowance (`[limits.chatter]`: more
  than `max_events` events within the last `per_cycles` cycles; no chatter limit in the spec: any
  event within 1,000 cycles) and stays over it for `fail_after` cycles with chatter. It is recorded as
  failed at the cycle whose events first took it over the allowance. Chatter comes and goes from cycle
  to cycle (a worn contact opens on some cycles and not on others), so it is judged over the
  allowance's window, not on consecutive cycles: a consecutive-cycle rule dated chatter failures
  hundreds of cycles after the simulator's true onset (tests/recorder/test_chatter_life.py).
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass

import numpy as np

from benchlog.analysis._types import BREAK, INCOMPLETE, MAKE, MISSED, NO_CHANGE, STUCK

NEUTRAL, CLEAN, CHATTER_SIGN, MISSED_MAKE, WELDED = -1, 0, 1, 2, 3
MODE_NAMES = {WELDED: "welded", MISSED_MAKE: "missed_make", CHATTER_SIGN: "chatter"}
FAILURE_MODES = tuple(MODE_NAMES.values())
_ORDER_CHATTER = 0.5  # between clean (0) and missed make (2): provisional code for "has chatter"
ANY_CHATTER_WINDOW = 1000  # cycles: the allowance's window when the spec sets no chatter limit


@dataclass(frozen=True, slots=True)
class Failure:
    channel: int
    cycle: int  # the analysis cycle (of this segment) where the failing streak began
    mode: str
    detail: str


class _Channel:
    __slots__ = (
        "pending_cycle",
        "pending_code",
        "pending_chatter",
        "mode",
        "start",
        "count",
        "recent",
        "over_start",
        "over_cycles",
        "failed",
    )

    def __init__(self) -> None:
        self.pending_cycle: int | None = None
        self.pending_code = NEUTRAL
        self.pending_chatter = 0
        self.mode = CLEAN
        self.start = 0
        self.count = 0
        self.recent: deque[tuple[int, int]] = deque()  # (cycle, chatter events) of chatter cycles
        self.over_start: int | None = None  # the cycle that took the chatter over the allowance
        self.over_cycles = 0  # chatter cycles since then, the allowance still exceeded
        self.failed = False


class LifeJudge:
    """Feed it actuation batches (`push`); it returns the units' failures as they become certain."""

    def __init__(self, fail_after: int = 5, chatter: dict[int, tuple[int, int] | None] | None = None) -> None:
        if fail_after < 1:
            raise ValueError("fail_after must be at least 1")
        self.fail_after = fail_after
        self.chatter = chatter or {}  # channel -> (max_events, per_cycles) or None (any chatter)
        self._ch: dict[int, _Channel] = {}

    def retire(self, channel: int) -> None:
        """Stop judging a channel (its unit failed or was removed before)."""
        self._ch.setdefault(channel, _Channel()).failed = True

    def failed(self, channel: int) -> bool:
        st = self._ch.get(channel)
        return bool(st and st.failed)

    def push(self, rows: np.ndarray) -> list[Failure]:
        out: list[Failure] = []
        if not len(rows):
            return out
        code = np.full(len(rows), float(CLEAN))
        flags = rows["flags"].astype(np.int64)
        # a stuck or missed state is judged on what was measured: on an actuation overlapping a data
        # gap (INCOMPLETE) the edges that would have shown it move may be the ones lost
        bad = ((flags & (STUCK | MISSED)) != 0) & ((flags & INCOMPLETE) == 0)
        code[(flags & (INCOMPLETE | NO_CHANGE)) != 0] = NEUTRAL
        code[(rows["chatter"] > 0) & (code == CLEAN)] = _ORDER_CHATTER
        code[bad & (rows["kind"] == MAKE)] = MISSED_MAKE
        code[bad & (rows["kind"] == BREAK)] = WELDED
        chatter = np.where(code == NEUTRAL, 0, rows["chatter"]).astype(np.int64)
        order = np.lexsort((rows["cycle"], rows["channel"]))
        ch_sorted = rows["channel"][order]
        chans, starts = np.unique(ch_sorted, return_index=True)
        ends = np.append(starts[1:], len(order))
        for c, a, b in zip(chans.tolist(), starts.tolist(), ends.tolist(), strict=True):
            st = self._ch.setdefault(c, _Channel())
            if st.failed:
                continue
            idx = order[a:b]
            cyc = rows["cycle"][idx].astype(np.int64)
            ucyc, first = np.unique(cyc, return_index=True)
            ccode = np.maximum.reduceat(code[idx], first)
            cchat = np.add.reduceat(chatter[idx], first)
            fail = self._advance(c, st, ucyc, ccode, cchat)
            if fail:
                out.append(fail)
        return out

    def finish(self) -> list[Failure]:
        """End of data: judge the last pending cycle of each channel."""
        out = []
        for c, st in self._ch.items():
            if st.failed or st.pending_cycle is None:
                continue
            fail = self._judge(
                c,
                st,
                np.array([st.pending_cycle]),
                np.array([st.pending_code]),
                np.array([st.pending_chatter]),
            )
            st.pending_cycle = None
            if fail:
                out.append(fail)
        return out

    def _advance(self, c: int, st: _Channel, ucyc, ccode, cchat) -> Failure | None:
        # merge with the cycle still open from the previous batch
        if st.pending_cycle is not None:
            if ucyc[0] == st.pending_cycle:
                ccode = ccode.copy()
                cchat = cchat.copy()
                ccode[0] = max(ccode[0], st.pending_code)
                cchat[0] += st.pending_chatter
            else:
                ucyc = np.r_[st.pending_cycle, ucyc]
                ccode = np.r_[st.pending_code, ccode]
                cchat = np.r_[st.pending_chatter, cchat]
        st.pending_cycle, st.pending_code, st.pending_chatter = (
            int(ucyc[-1]),
            float(ccode[-1]),
            int(cchat[-1]),
        )
        return self._judge(c, st, ucyc[:-1], ccode[:-1], cchat[:-1])

    def _judge(self, c: int, st: _Channel, ucyc, ccode, cchat) -> Failure | None:
        if not len(ucyc):
            return None
        ccode = ccode.astype(np.float64)
        has_chatter = np.flatnonzero(ccode == _ORDER_CHATTER)
        chatter = self._chatter(c, st, ucyc, cchat, has_chatter)
        ccode[has_chatter] = CLEAN
        keep = np.flatnonzero(ccode != NEUTRAL)
        streak = self._streaks(c, st, ucyc[keep], ccode[keep].astype(np.int64))
        if streak is not None:
            streak = (int(keep[streak[0]]), streak[1])
        found = [f for f in (chatter, streak) if f is not None]
        if not found:
            return None
        st.failed = True
        return min(found, key=lambda f: f[0])[1]  # whichever became certain first

    def _chatter(self, c: int, st: _Channel, ucyc, cchat, has_chatter) -> tuple[int, Failure] | None:
        """(position, failure) where the chatter allowance's rule fails the unit, or None."""
        limit = self.chatter.get(c)
        max_events, per_cycles = limit if limit is not None else (0, ANY_CHATTER_WINDOW)
        for i in has_chatter.tolist():  # only cycles with chatter: rare until a unit wears out
            cy, ev = int(ucyc[i]), int(cchat[i])
            st.recent.append((cy, ev))
            while st.recent and st.recent[0][0] <= cy - per_cycles:
                st.recent.popleft()
            if sum(e for _, e in st.recent) <= max_events:
                st.over_start, st.over_cycles = None, 0
                continue
            if st.over_start is None:
                st.over_start, st.over_cycles = cy, 0
            st.over_cycles += 1
            if st.over_cycles >= self.fail_after:
                allowance = f"{max_events} per {per_cycles:,} cycles"
                return i, Failure(
                    c,
                    st.over_start,
                    "chatter",
                    f"chatter over its allowance ({allowance}) from cycle {st.over_start},"
                    f" on {self.fail_after} cycles",
                )
        return None

    def _streaks(self, c: int, st: _Channel, ucyc, ccode) -> tuple[int, Failure] | None:
        """(position, failure) where `fail_after` consecutive like signs fail the unit, or None."""
        if not len(ucyc):
            return None
        cut = np.flatnonzero(np.r_[True, ccode[1:] != ccode[:-1]])
        lengths = np.diff(np.r_[cut, len(ccode)])
        for k, n in zip(cut.tolist(), lengths.tolist(), strict=True):
            sign = int(ccode[k])
            if sign == CLEAN:
                st.mode, st.count = CLEAN, 0
                continue
            before = st.count if sign == st.mode else 0
            if sign != st.mode:
                st.mode, st.start = sign, int(ucyc[k])
            st.count = before + n
            if st.count >= self.fail_after:
                name = MODE_NAMES[sign]
                at = k + (self.fail_after - before) - 1
                return at, Failure(
                    c, st.start, name, f"{name} on {self.fail_after} consecutive cycles from cycle {st.start}"
                )
        return None
