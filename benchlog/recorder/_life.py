"""Deciding when a unit has failed, from the actuations the analysis reports.

The rule (docs/store.md, "Life status"):

- Each cycle of a unit gets one sign from its make and break:
  - `welded`: the break is flagged STUCK or MISSED (the contact would not open);
  - `missed_make`: the make is flagged STUCK or MISSED (the contact would not close);
  - `chatter`: the cycle has chatter events and the unit's chatter over the last `per_cycles`
    cycles exceeds the spec's `max_events` (no chatter limit in the spec: any chatter event);
  - `neutral`: nothing measurable (every row INCOMPLETE, or NO_CHANGE: driven while the contact
    already sat in the expected state, which is how the other half of a welded or missed cycle shows);
  - `clean` otherwise. Precedence: welded > missed_make > chatter > clean > neutral.
- A unit fails when `fail_after` consecutive cycles (neutral ones skipped, gaps in the cycle numbers
  ignored) carry the same failure sign; it is recorded as failed at the *first* cycle of that streak
  with that mode. A clean cycle, or a different sign, restarts the count.
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
        bad = (flags & (STUCK | MISSED)) != 0
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
        limit = self.chatter.get(c)
        for i in has_chatter.tolist():  # only cycles with chatter: rare until a unit wears out
            cy, ev = int(ucyc[i]), int(cchat[i])
            if limit is None:
                ccode[i] = CHATTER_SIGN
                continue
            max_events, per_cycles = limit
            st.recent.append((cy, ev))
            while st.recent and st.recent[0][0] <= cy - per_cycles:
                st.recent.popleft()
            ccode[i] = CHATTER_SIGN if sum(e for _, e in st.recent) > max_events else CLEAN
        keep = ccode != NEUTRAL
        ucyc, ccode = ucyc[keep], ccode[keep].astype(np.int64)
        if not len(ucyc):
            return None
        # runs of equal signs
        cut = np.flatnonzero(np.r_[True, ccode[1:] != ccode[:-1]])
        lengths = np.diff(np.r_[cut, len(ccode)])
        for k, n in zip(cut.tolist(), lengths.tolist(), strict=True):
            sign = int(ccode[k])
            if sign == CLEAN:
                st.mode, st.count = CLEAN, 0
                continue
            if sign == st.mode:
                st.count += n
            else:
                st.mode, st.start, st.count = sign, int(ucyc[k]), n
            if st.count >= self.fail_after:
                st.failed = True
                name = MODE_NAMES[sign]
                return Failure(
                    c, st.start, name, f"{name} on {self.fail_after} consecutive cycles from cycle {st.start}"
                )
        return None
