"""A recording replayed: records with no host times, paced by the sampler's beats, in large batches.

How this works
--------------
A capture file carries no receive times, so the replay makes them up: the records up to each beat are
one *group*, and each group is received `Timeline.replay_step()` (250 ms, at most a quarter wrap) after
the one before. The reference is plain: `Timeline.push(group, host)` group by group, which costs a few
dozen numpy calls per beat, a beat every couple of hundred edges.

`replay_groups` gets the same result for many groups at once. While nothing unusual happens (the epoch
runs on: no announcement, no reset pending, no outage, nothing held) it lays all their records out in one
segment with a host time per row (its group's), unwraps and converts the ticks in one pass, checks every
row for the signs of a restarted counter, and hands the rows out as `_consume` would group by group. The
one check that depends on the grouping, a tick ahead of the host clock (its receive offset below the
least offset of earlier groups by more than the slack and the clock-rate margin), is made against the
least offset of the group just before only, which is never below the least of all earlier groups: so the
batch check flags every row the group-by-group check flags (and perhaps more). Any flagged row sends its
group and the next ones through `Timeline.push`, one group at a time, as does every group holding an
announcement. State after the batch is what the group-by-group path leaves: the least offset and its
time (the first row with the least offset), the highest tick and the host time of the group that raised
it, the pending beat and the settled ones. Incidents come in the order the groups would give them.
"""

from __future__ import annotations

import numpy as np

from benchlog.clock._convert import signed_deltas, ticks_to_ns, ticks_to_ns_array
from benchlog.clock._timeline import (
    DECODE_FAULT,
    EPOCH_LIMIT_NS,
    NS_PER_S,
    Incident,
    Timed,
    Timeline,
    _Faults,
    _Segment,
    merge_timed,
)
from benchlog.wire import (
    BLOCK_BEAT,
    Announce,
    Beat,
    Block,
    Drive,
    Edges,
    Fault,
    GoAccepted,
    Notice,
    PlanAccepted,
    Pong,
    Record,
    SequenceGap,
)

MAX_BACKOFF = 1024  # groups taken one by one, at most, before the batch path is tried again


def _beat_rows(block: Block) -> np.ndarray:
    return np.flatnonzero(block.kind == BLOCK_BEAT) if len(block.captured) else np.zeros(0, np.intp)


def split_after_beats(records: list[Record], k: int) -> tuple[list[Record], list[Record]]:
    """The records up to and including the k-th beat, and the rest (a block is cut between rows)."""
    seen = 0
    for i, rec in enumerate(records):
        if isinstance(rec, Beat):
            seen += 1
            if seen == k:
                return records[: i + 1], records[i + 1 :]
        elif isinstance(rec, Block):
            rows = _beat_rows(rec)
            if seen + len(rows) >= k:
                head, tail = rec.split(int(rows[k - seen - 1]) + 1)
                return records[:i] + [head], ([tail] if len(tail) else []) + records[i + 1 :]
            seen += len(rows)
    return records, []


def split_after_last_beat(records: list[Record]) -> tuple[list[Record], list[Record]]:
    """The records up to and including the last beat, and the rest."""
    for i in range(len(records) - 1, -1, -1):
        rec = records[i]
        if isinstance(rec, Beat):
            return records[: i + 1], records[i + 1 :]
        if isinstance(rec, Block):
            rows = _beat_rows(rec)
            if len(rows):
                head, tail = rec.split(int(rows[-1]) + 1)
                return records[:i] + [head], ([tail] if len(tail) else []) + records[i + 1 :]
    return [], records


def replay_groups(tl: Timeline, records: list[Record]) -> Timed:
    """Place `records` as groups ending at beats (the last one may end without), paced as a replay."""
    parts: list[Timed] = []
    backoff = 0
    wait = 0
    while records:
        if wait == 0 and _batch_ok(tl):
            placed, records = _batch(tl, records)
            if placed is not None:
                parts.append(placed)
                backoff = 0
            else:
                backoff = min(MAX_BACKOFF, max(1, 2 * backoff))
                wait = backoff
            if not records:
                break
        group, records = split_after_beats(records, 1)
        tl._replay_host += tl.replay_step()
        parts.append(tl.push(group, tl._replay_host))
        wait = max(0, wait - 1)
    return merge_timed(parts)


def _batch_ok(tl: Timeline) -> bool:
    return (
        tl._bits_known()
        and tl._started
        and tl._reset_pending is None
        and not tl._disconnected
        and tl._outage_hint is None
        and not tl._held
        and tl.time_scale == 1.0
    )


def _batch(tl: Timeline, records: list[Record]) -> tuple[Timed | None, list[Record]]:
    """Place the leading groups the batch path can take; (their Timed or None, the records left)."""
    stop = next((i for i, r in enumerate(records) if isinstance(r, Announce)), None)
    if stop is None:
        take, rest = records, []
    else:
        take, tail = split_after_last_beat(records[:stop])
        rest = tail + records[stop:]
    if not take:
        return None, records
    seg = _segment(take)
    if seg is None:
        return None, records
    bad_group = _check(tl, seg)
    if bad_group is not None:
        if bad_group == 0:
            return None, records
        take, tail = split_after_beats(take, bad_group)
        rest = tail + rest
        seg = _segment(take)
        assert seg is not None and _check(tl, seg) is None  # the groups before the flagged one pass
    return _commit(tl, seg), rest


class _Batch:
    """A segment laid out for the batch path, with its rows' groups and placement."""

    __slots__ = ("seg", "groups", "raw", "kind", "channel", "level", "rel", "hi", "t", "row_group", "offset")


def _segment(records: list[Record]) -> _Batch | None:
    """The records as one segment (as `Timeline._process` gathers one push), None if one needs more."""
    seg = _Segment()
    trailing = False  # records after the last beat: one more group
    for rec in records:
        trailing = True
        if isinstance(rec, Block):
            if len(rec):
                seg.add_block(rec)
                trailing = rec.kind[-1] != BLOCK_BEAT
        elif isinstance(rec, Edges):
            if len(rec):
                seg.add_edges(rec)
        elif isinstance(rec, Drive):
            seg.add_drive(rec)
        elif isinstance(rec, Beat):
            seg.add_beat(rec)
            trailing = False
        elif isinstance(rec, PlanAccepted | GoAccepted):
            seg.mark(rec)
        elif isinstance(rec, Fault):
            last = seg.markers[-1] if seg.markers else None
            if last is not None and last[0] == seg.n and isinstance(last[1], _Faults):
                last[1].add(rec)
            else:
                seg.mark(_Faults(rec))
        elif isinstance(rec, SequenceGap | Notice | Pong):
            seg.mark(rec)
        elif isinstance(rec, Announce):
            return None
    b = _Batch()
    b.seg = seg
    b.groups = seg.group + (1 if trailing else 0)
    return b


def _check(tl: Timeline, b: _Batch) -> int | None:
    """Unwrap and convert the batch's ticks; the first group with a row the push path might take for a
    counter restart (see the module doc), or None."""
    seg = b.seg
    raw, b.kind, b.channel, b.level = seg.arrays()
    n = len(raw)
    b.raw = raw
    if not n:
        return None
    bits, hz = tl.counter_bits, tl.clock_hz
    if bits < 64:
        raw &= np.uint64((1 << bits) - 1)
    d = signed_deltas(raw, tl._last_raw, bits)
    too_far = None
    if not within_epoch_limit(tl._last_rel, n, bits, hz):  # else no row can be placed that far
        rel_approx = tl._last_rel + np.cumsum(d.astype(np.float64))
        too_far = np.abs(rel_approx) * (NS_PER_S / hz) > EPOCH_LIMIT_NS
        if too_far.any():
            d[int(np.argmax(too_far)) :] = 0
    rel = np.cumsum(d)
    rel += tl._last_rel
    if (d[1:] >= 0).all():  # no row steps back (the usual order): the running maximum is the row itself
        hi = np.maximum(rel, tl._hi_rel)
    else:
        hi = np.maximum.accumulate(rel)
        np.maximum(hi, tl._hi_rel, out=hi)
    prior_hi = np.empty_like(hi)
    prior_hi[0] = tl._hi_rel
    prior_hi[1:] = hi[:-1]
    back = rel < prior_hi - tl._back_tolerance()
    t = tl._ns0 + ticks_to_ns_array(rel, hz)
    beat_pos = seg.beats()[0]
    row_group = _count_before(beat_pos, n, 1)  # beats before each row
    step = tl.replay_step()
    offset = (tl._replay_host + step * (row_group + 1) - tl._epoch_start_host) - t
    starts = np.concatenate(([0], beat_pos[beat_pos < n - 1] + 1))  # each group's first row
    far = np.iinfo(np.int64).max
    group_min = np.full(int(row_group[-1]) + 2, far, np.int64)
    group_min[row_group[starts] + 1] = np.minimum.reduceat(offset, starts)  # shifted: the group before
    # A row is ahead when its offset is under the least of the groups before (`least`) by more than the
    # slack; a group holds such a row exactly when its own least offset is: judged group by group.
    least = group_min[:-1]
    if tl._min_offset is not None:
        least = np.minimum(least, tl._min_offset)  # (else the first group has nothing to compare with)
    ahead = np.flatnonzero((least != far) & (group_min[1:] < least - tl.host_slack_ns))
    bad = back if too_far is None else back | too_far
    first_bad = [int(ahead[0])] if len(ahead) else []
    if bad.any():
        first_bad.append(int(row_group[int(np.argmax(bad))]))
    if first_bad:
        return min(first_bad)  # the group of the first row taken for a restarted counter
    b.rel, b.hi, b.t, b.row_group, b.offset = rel, hi, t, row_group, offset
    return None


def within_epoch_limit(last_rel: int, n: int, bits: int, clock_hz: int) -> bool:
    """Whether `n` more ticks unwrapped after `last_rel` surely stay (with a margin of two) inside
    `EPOCH_LIMIT_NS`: each signed delta moves at most half a wrap. Then the float check for garbage
    ticks beyond any run length can find none, and is skipped."""
    reach = abs(last_rel) + n * (1 << (bits - 1))
    return reach * NS_PER_S // clock_hz <= EPOCH_LIMIT_NS // 2


def _count_before(pos: np.ndarray, n: int, shift: int) -> np.ndarray:
    """For each row 0..n-1, how many of the distinct sorted positions `pos` are at or below the row
    minus `shift`: `np.searchsorted(pos, np.arange(n), "left" if shift else "right")`, in one pass."""
    marks = np.zeros(n + shift, np.intp)
    marks[pos + shift] = 1
    return np.cumsum(marks[:n])


def _commit(tl: Timeline, b: _Batch) -> Timed:
    seg = b.seg
    step = tl.replay_step()
    h0 = tl._replay_host

    def host(g: int) -> int:
        return h0 + step * (g + 1)

    tl._incidents = tl._queued
    tl._queued = []
    queued = len(tl._incidents)
    run_before = tl._run_hi_ns
    host_last = tl._host_last
    n = len(b.raw)
    settled: list[int] = []
    if n:
        rel, t = b.rel, b.t
        tl._last_raw = int(b.raw[-1])
        tl._last_rel = int(rel[-1])
        top = int(b.hi[-1])
        if top > tl._hi_rel:
            prior = np.empty_like(b.hi)
            prior[0] = tl._hi_rel
            prior[1:] = b.hi[:-1]
            raised = int(np.flatnonzero(rel > prior)[-1])
            tl._hi_rel, tl._hi_host = top, host(int(b.row_group[raised]))
            tl._run_hi_ns = max(tl._run_hi_ns, tl._ns0 + ticks_to_ns(top, tl.clock_hz))
        j = int(np.argmin(b.offset))
        if tl._min_offset is None or int(b.offset[j]) < tl._min_offset:
            tl._min_offset, tl._min_offset_t = int(b.offset[j]), int(t[j])
        beats = seg.beats()
        beat_host = h0 + step * (np.arange(len(beats[0]), dtype=np.int64) + 1)
        settled = tl._consume(0, n, rel, t, b.kind, b.channel, b.level, beats, seg.drive_cycles(), beat_host)
    keyed = [((g, 0, k), inc) for k, (g, inc) in enumerate(zip(settled, tl._incidents[queued:], strict=True))]
    del tl._incidents[queued:]
    if seg.markers:
        upto = np.maximum.accumulate(b.t) if n else np.zeros(0, np.int64)
        beat_pos = seg.beats()[0]
        ends = np.append(beat_pos + 1, n)  # where each group's rows end
        for k, ((p, rec), g) in enumerate(zip(seg.markers, seg.marker_group, strict=True)):
            t_at = max(run_before, int(upto[p - 1])) if p else run_before
            tl._host_last = host(g - 1) if g else host_last
            before = len(tl._incidents)
            if isinstance(rec, _Faults):
                t_next = max(t_at, int(upto[p])) if p < ends[g] else t_at
                tl._incidents.append(
                    Incident(DECODE_FAULT, t_at, t_next, host(g), host(g), detail=rec.detail())
                )
            else:
                tl._marker(rec, t_at, host(g))
            keyed += [((g, 1, k), inc) for inc in tl._incidents[before:]]
            del tl._incidents[before:]
    keyed.sort(key=lambda kv: kv[0])
    tl._incidents += [inc for _, inc in keyed]
    tl._host_last = host(b.groups - 1) if b.groups else host_last
    tl._replay_host = h0 + step * b.groups
    tl._push_min = None
    return tl._collect()
