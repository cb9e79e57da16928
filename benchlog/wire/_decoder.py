"""The sans-I/O decoder: bytes in, records out, for either form, telling the forms apart by itself.

How this works
--------------
The decoder holds the bytes of one unfinished line or frame and a state, `form`:

- `None` (undecided): scan terminators (`\\n` and `0x00`) in stream order; the first unit that is a
  CRC-checked packed frame or a line that parses (with a correct checksum where given) decides the form.
  Bytes before it are one fault ("before first record").
- `"line"`: every whole line in the buffer is classified at once with numpy (`_lineform`); well-formed
  edge lines become `Edges` batches, the rest go through the one-line parser.
- `"packed"`: the buffer is split at `0x00`; each frame is COBS-decoded and CRC-checked in a short
  loop of C calls; the payloads of consecutive edge frames are decoded together with numpy.

In a decided form, 64 consecutive faults or 4 KiB of faulty input send the decoder back to undecided.
A unit that grows past the longest possible line (160 bytes) or frame (1,024 bytes decoded) is a fault;
the decoder skips to the next terminator, so memory stays bounded whatever arrives.
"""

from __future__ import annotations

import bisect
import re
import zlib

import numpy as np

from benchlog._slotted import Slotted
from benchlog.wire._encoders import (
    MAX_BOARD_ID,
    MAX_EDGES_PER_FRAME,
    MAX_NOTICE,
    TYPE_ANNOUNCE,
    TYPE_BEAT,
    TYPE_DRIVE,
    TYPE_EDGES,
    TYPE_GO_ACCEPTED,
    TYPE_NOTICE,
    TYPE_PLAN_ACCEPTED,
    TYPE_PONG,
    check_board_id,
)
from benchlog.wire._framing import DecodeError, cobs_decode, cobs_decode_spans, crc32_all_valid
from benchlog.wire._lineform import (
    CHECK_CRC,
    CHECK_NONE,
    CHECK_XOR,
    EMPTY,
    MAX_LINE,
    MAX_LINE_V2,
    TOO_LONG,
    LineContext,
    fast_edge_lines,
    parse_line,
    quick_beats,
)
from benchlog.wire._records import (
    BLOCK_BEAT,
    BLOCK_DRIVE,
    BLOCK_EDGE,
    Announce,
    Beat,
    Block,
    DecodeCounters,
    Drive,
    Edges,
    Fault,
    GoAccepted,
    Notice,
    PlanAccepted,
    Pong,
    Record,
    SequenceGap,
    Unknown,
)

MAX_FRAME = 1024
MAX_ENCODED = MAX_FRAME + MAX_FRAME // 254 + 2  # COBS adds at most one byte per 254
REDETECT_FAULTS = 64
# whole frames in a read shorter than this are decoded one by one: numpy's fixed cost per read beats the
# loop from about 6 KiB (200 frames) on; at 256 KiB the loop took 13 ms where numpy took 3
BULK_BYTES = 1 << 13
REDETECT_BYTES = 4096

BEFORE_FIRST = "before first record"
COBS = "COBS"
CRC = "CRC"
SHORT_FRAME = "frame too short"
LONG_FRAME = "frame too long"
PAYLOAD = "payload length"
RANGE = "value out of range"

_EDGE_HEAD = np.dtype([("base", "<u8"), ("count", "u1")])
_TERMINATOR = re.compile(rb"[\n\x00]")
_FIXED_PAYLOAD = {TYPE_PONG: 2, TYPE_PLAN_ACCEPTED: 13, TYPE_GO_ACCEPTED: 10}


class _EdgeRun:
    """Placeholder in the output for `count` consecutive edge frames, decoded later all at once."""

    __slots__ = ("first", "count")

    def __init__(self, first: int) -> None:
        self.first = first
        self.count = 1


def _edges_empty() -> Edges:
    return Edges(np.zeros(0, np.uint8), np.zeros(0, np.uint8), np.zeros(0, np.uint64))


class _FramePlan(Slotted, eq=False):
    """What `_scan_frames` found in a run of frames: per frame whether it is plain (`simple`) and its
    sequence number; the rows of every plain frame laid out in frame order, with where each frame's
    rows, drive rows and beat rows start."""

    __slots__ = (
        "simple",
        "seq",
        "row_start",
        "drive_start",
        "beat_start",
        "kind",
        "channel",
        "level",
        "tick",
        "cycle",
        "captured",
        "dropped",
    )

    def __init__(
        self,
        simple: np.ndarray,
        seq: np.ndarray,
        row_start: np.ndarray,
        drive_start: np.ndarray,
        beat_start: np.ndarray,
        kind: np.ndarray,
        channel: np.ndarray,
        level: np.ndarray,
        tick: np.ndarray,
        cycle: np.ndarray,
        captured: np.ndarray,
        dropped: np.ndarray,
    ) -> None:
        self.simple = simple
        self.seq = seq
        self.row_start = row_start
        self.drive_start = drive_start
        self.beat_start = beat_start
        self.kind = kind
        self.channel = channel
        self.level = level
        self.tick = tick
        self.cycle = cycle
        self.captured = captured
        self.dropped = dropped


def _line_lines(a: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(where each `\\n` is, where each line starts, where each ends without its `\\r\\n`) of whole lines."""
    nl = np.flatnonzero(a == 0x0A)
    starts = np.empty_like(nl)
    starts[0] = 0
    starts[1:] = nl[:-1] + 1
    cr = a[nl - 1] == 0x0D
    if not cr.any():  # `\n` alone ends every line: the ends are the newlines
        return nl, starts, nl
    return nl, starts, nl - ((nl > starts) & cr)


def _with_beats(
    at: np.ndarray,
    beat_ticks: list[int],
    kinds: np.ndarray,
    chans: np.ndarray,
    levels: np.ndarray,
    ticks: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The block's rows with a beat row (channel and level 0) before row `at[i]` for each beat (`at`
    ascending; `len(ticks)` for after the last): what `np.insert` gives each column, with the rows'
    new places worked out once for all four."""
    n = len(ticks) + len(at)
    beat_rows = at + np.arange(len(at))
    old = np.ones(n, bool)
    old[beat_rows] = False
    out = []
    for col, beat_value in ((kinds, BLOCK_BEAT), (chans, 0), (levels, 0)):
        new = np.zeros(n, col.dtype)
        new[old] = col
        if beat_value:
            new[beat_rows] = beat_value
        out.append(new)
    new_ticks = np.empty(n, ticks.dtype)
    new_ticks[old] = ticks
    new_ticks[beat_rows] = beat_ticks
    return out[0], out[1], out[2], new_ticks


def _le(d: np.ndarray, at: np.ndarray, size: int) -> np.ndarray:
    """Little-endian unsigned integers of `size` bytes at offsets `at` of `d`, as uint64."""
    # one gather of whole words through a view of `d` as overlapping `size`-byte items (one at each byte
    # offset; raw bytes: a gather of unaligned integers takes numpy's slow path), not a gather per byte
    words = np.ndarray((len(d) - size + 1,), np.dtype((np.void, size)), d, 0, (1,))
    return words[at].view(f"<u{size}").astype(np.uint64)


def _scan_frames(a: np.ndarray, seg_s: np.ndarray, seg_e: np.ndarray, ctx: LineContext) -> _FramePlan:
    """Decode and check every frame `a[seg_s[i]:seg_e[i]]` with numpy; see `Decoder._frame_block`.

    A frame is plain when it is intact (COBS, length, CRC), follows the frame before it in sequence, and
    is an edge frame, a drive or a version 1 beat whose values are in range: exactly the frames the
    one-at-a-time path would turn into those records with nothing else said."""
    n_seg = len(seg_s)
    fits = (seg_e - seg_s) <= MAX_ENCODED
    if fits.all():
        ok, dec, dstart, dlen = cobs_decode_spans(a, seg_s, seg_e)
        dstart, dlen = dstart.astype(np.int64, copy=False), dlen.astype(np.int64, copy=False)
    else:
        ok = np.zeros(n_seg, bool)
        dstart = np.zeros(n_seg, np.int64)
        dlen = np.zeros(n_seg, np.int64)
        ok[fits], dec, dstart[fits], dlen[fits] = cobs_decode_spans(a, seg_s[fits], seg_e[fits])
    ok &= (dlen >= 7) & (dlen <= MAX_FRAME)
    good = np.flatnonzero(ok)
    if len(good):
        if len(good) == n_seg:
            frames, starts = dec, dstart
        else:
            lens = dlen[good]
            starts = np.cumsum(lens) - lens
            frames = dec[np.repeat(dstart[good] - starts, lens) + np.arange(int(lens.sum()))]
        if not crc32_all_valid(frames, dlen[good], starts):
            crc, whole = zlib.crc32, dec.tobytes()
            bad = [
                crc(whole[s : s + n - 4]) != int.from_bytes(whole[s + n - 4 : s + n], "little")
                for s, n in zip(dstart[good].tolist(), dlen[good].tolist(), strict=True)
            ]
            ok[good[np.asarray(bad, bool)]] = False
    d = np.concatenate((dec, np.zeros(32, np.uint8)))  # fixed offsets past a short frame stay inside
    at = np.where(ok, dstart, 0)
    n = dlen
    kind = np.where(ok, d[at], 0)
    seq = (d[at + 1].astype(np.int64) | (d[at + 2].astype(np.int64) << 8)).astype(np.int64)
    limit = np.uint64((1 << ctx.counter_bits) - 1) if ctx.counter_bits < 64 else None

    def in_range(tick: np.ndarray) -> np.ndarray:
        return np.ones(len(tick), bool) if limit is None else tick <= limit

    # drives (version 1: 10-byte payload; version 2 adds the cycle) and version 1 beats
    is_drive = (kind == TYPE_DRIVE) & ((n == 17) | (n == 21))
    d_channel, d_level, d_tick = d[at + 3], d[at + 4], _le(d, at + 5, 8)
    is_drive &= (d_channel < ctx.channels) & (d_level <= 1) & in_range(d_tick)
    with_cycle = n == 21  # a version 2 drive's cycle (a version 1 stream has none: nothing to read)
    d_cycle = np.full(len(n), -1, np.int64)
    if with_cycle.any():
        d_cycle = np.where(with_cycle, _le(d, at + 13, 4).astype(np.int64), d_cycle)
    is_beat = (kind == TYPE_BEAT) & (n == 23)
    b_tick = _le(d, at + 3, 8)  # a beat's tick, or an edge frame's base tick: the same bytes
    is_beat &= in_range(b_tick)
    # edge frames: base tick, count, then 3-byte entries
    count = np.where(n >= 12, d[at + 11], 0).astype(np.int64)
    size = 16 + 3 * count
    is_edges = (kind == TYPE_EDGES) & (count > 0) & ((n == size) | ((ctx.version > 1) & (n > size)))
    base = b_tick
    ef = np.flatnonzero(is_edges)
    cnt = count[ef]
    first = np.cumsum(cnt) - cnt
    total = int(cnt.sum())
    # each entry's offset: its frame's first entry's, plus 3 per entry before it in the frame
    off = np.repeat(dstart[ef] + 12 - 3 * first, cnt)
    off += 3 * np.arange(total)
    chan_level = d[off]
    bad_entry = ((chan_level & np.uint8(0x70)) != 0) | ((chan_level & np.uint8(0x0F)) >= ctx.channels)
    if total and bad_entry.any():
        bad_frame = np.add.reduceat(bad_entry, first) > 0
    else:
        bad_frame = np.zeros(len(ef), bool)
    bad_frame |= ~in_range(base[ef])
    is_edges[ef[bad_frame]] = False
    # the delta: the little-endian 2-byte word after it (two byte gathers: quicker than `_le` for
    # this many short words)
    off += 1
    delta = (d[off].astype(np.uint16) | (d[off + 1].astype(np.uint16) << np.uint16(8))).astype(np.uint64)
    cum = np.cumsum(delta, dtype=np.uint64)
    e_tick = np.repeat(base[ef] - (cum[first] - delta[first]), cnt) + cum if total else cum
    if limit is not None:
        e_tick &= limit
    if bad_frame.any():
        keep = np.repeat(~bad_frame, cnt)
        chan_level, e_tick = chan_level[keep], e_tick[keep]

    seq_next = np.ones(n_seg, bool)
    seq_next[1:] = seq[1:] == ((seq[:-1] + 1) & 0xFFFF)
    simple = ok & seq_next & (is_edges | is_drive | is_beat)
    rows_per = np.where(is_edges, count, (is_drive | is_beat).astype(np.int64))
    row_start = np.zeros(n_seg + 1, np.int64)
    np.cumsum(rows_per, out=row_start[1:])
    # rows: an edge frame's entries, a drive's or a beat's one row; the one-row frames are placed by
    # index, the edge entries fill the rest in order
    n_rows = int(row_start[-1])
    one = np.flatnonzero(is_drive | is_beat)
    at_one, one_drive = row_start[one], is_drive[one]
    r_kind = np.full(n_rows, BLOCK_EDGE, np.uint8)
    r_kind[at_one] = np.where(one_drive, BLOCK_DRIVE, BLOCK_BEAT)
    edge_rows = np.ones(n_rows, bool)
    edge_rows[at_one] = False
    edge_rows = np.flatnonzero(edge_rows)  # an index array: quicker than the mask for three columns
    r_channel = np.empty(n_rows, np.uint8)
    r_level = np.empty(n_rows, np.uint8)
    r_tick = np.empty(n_rows, np.uint64)
    r_channel[edge_rows] = chan_level & np.uint8(0x0F)
    r_level[edge_rows] = chan_level >> np.uint8(7)
    r_tick[edge_rows] = e_tick
    r_channel[at_one] = np.where(one_drive, d_channel[one], 0)
    r_level[at_one] = np.where(one_drive, d_level[one], 0)
    r_tick[at_one] = np.where(one_drive, d_tick[one], b_tick[one])
    drive_start = np.zeros(n_seg + 1, np.int64)
    np.cumsum(is_drive.astype(np.int64), out=drive_start[1:])
    beat_start = np.zeros(n_seg + 1, np.int64)
    np.cumsum(is_beat.astype(np.int64), out=beat_start[1:])
    return _FramePlan(
        simple,
        seq,
        row_start,
        drive_start,
        beat_start,
        r_kind,
        r_channel,
        r_level,
        r_tick,
        d_cycle[is_drive],
        _le(d, at[is_beat] + 11, 4).astype(np.int64),
        _le(d, at[is_beat] + 15, 4).astype(np.int64),
    )


def _expand(out: list[Record]) -> list[Record]:
    """Blocks as the records they hold, an edge run joined to an `Edges` batch just before it."""
    if not any(isinstance(r, Block) for r in out):
        return out
    done: list[Record] = []
    for rec in out:
        for r in rec.expand() if isinstance(rec, Block) else (rec,):
            prev = done[-1] if done else None
            if isinstance(r, Edges) and isinstance(prev, Edges):
                done[-1] = Edges(
                    np.concatenate([prev.channel, r.channel]),
                    np.concatenate([prev.level, r.level]),
                    np.concatenate([prev.tick, r.tick]),
                )
            else:
                done.append(r)
    return done


class Decoder:
    """Turns sampler bytes into records. `feed` never raises and keeps at most one unit buffered."""

    def __init__(self) -> None:
        self.counters = DecodeCounters()
        self.form: str | None = None
        self._ctx = LineContext()
        self._buf = b""
        self._skipping = False  # inside an over-long unit: drop up to the next terminator
        self._skipped = 0
        self._bad_units = 0  # consecutive faults since the last good record
        self._bad_bytes = 0
        self._expected_seq: int | None = None
        self._undecided = 0  # bytes dropped while undecided, reported as one fault at the decision
        self._idle = 0  # of those, lone 0x00 delimiters (a packed sampler's idle or sync bytes)
        self._blank = 0  # and empty lines (a line sampler's delimiter after a reset)
        self._out: list[Record] = []
        self._form_asked: str | None = None  # the host asked for this form (FORM L / FORM P)
        self._after_outage = False  # the link went down: judge the next frame's sequence number
        # after an outage, whether the first frame continued the sequence (None: not known yet, or a
        # form without sequence numbers); see `outage`
        self.sequence_kept: bool | None = None

    # -- public ---------------------------------------------------------------------------------------

    def outage(self) -> None:
        """The link was down. The next packed frame says whether the sampler lost anything meanwhile:
        `sequence_kept` is True when it continues the sequence (a sampler that held its output, or
        sent nothing), False when frames are missing. (A loss of exactly a multiple of 65,536 frames
        would pass for none; the sequence number is 16 bits.)"""
        self._after_outage = True
        self.sequence_kept = None

    def feed(self, data: bytes, *, blocks: bool = False) -> list[Record]:
        """Decode `data` (any chunk of the stream) and return the records completed by it.

        With `blocks`, consecutive edges, drives and version 1 beats come as `Block`s (columns, not an
        object per record), for a reader taking millions of records at once; `Block.expand` gives the
        records this returns without it."""
        self.counters.bytes_in += len(data)
        buf = self._buf + bytes(data) if self._buf else bytes(data)
        self._out = []
        for _ in range(1000):  # each pass consumes input or changes state; the bound is a safety net
            form = self.form
            if self._form_asked is not None and form is not None:
                cut = self._switch_point(buf)
                if cut is not None:  # old form up to the cut, then look afresh
                    self._skipping = False
                    rest = buf[cut:]
                    head = self._lines(buf[:cut]) if form == "line" else self._frames(buf[:cut])
                    if head:
                        self._fault("unfinished before a form switch", len(head))
                    self.form = form = None
                    self._expected_seq = None
                    buf = rest
            if form is None:
                buf = self._detect(buf)
            elif form == "line":
                buf = self._lines(buf)
            else:
                buf = self._frames(buf)
            if self.form == form or not buf:
                break
        self._buf = buf
        out, self._out = self._out, []
        return out if blocks else _expand(out)

    def expect_form(self, form: str) -> None:
        """The host asked the sampler to switch to `form` ("line" or "packed").

        The decoder then looks for the first unit of the new form as bytes arrive, decodes the old form
        up to it and the new form from it, instead of waiting for a run of faults, so no record is lost.
        """
        self._form_asked = None if form == self.form else form

    def _switch_point(self, buf: bytes) -> int | None:
        """Where the first whole unit of the asked form starts in `buf`, or None while none is seen.

        A packed frame may contain newline bytes, so the candidates are the unit boundaries of the old
        form, tried from the left; the first that starts a valid unit of the new form wins.
        """
        if self._form_asked == "packed":
            end = buf.find(b"\0")
            if end < 0:
                return None
            lo = max(0, end - MAX_ENCODED)
            starts = [0] if lo == 0 else []
            starts += [m.end() for m in re.finditer(b"\n", buf[lo:end])]
            for st in starts:
                st += lo if st else 0
                if st <= end and self._valid_frame(buf[st:end]):
                    return st
            return None
        for st in [0] + [m.end() for m in re.finditer(b"\0", buf)]:
            nl = buf.find(b"\n", st)
            if nl < 0:
                return None
            line = buf[st : nl - 1 if nl > st and buf[nl - 1] == 13 else nl]
            if b"\0" not in line and not isinstance(parse_line(line, self._ctx)[0], str | Unknown):
                return st
        return None

    # -- bookkeeping ----------------------------------------------------------------------------------

    def _fault(self, reason: str, nbytes: int) -> bool:
        """Record a fault; True when the fault run now sends the decoder back to undecided."""
        c = self.counters
        c.faults += 1
        c.fault_bytes += nbytes
        c.by_reason[reason] = c.by_reason.get(reason, 0) + 1
        out = self._out
        prev = out[-1] if out else None
        if isinstance(prev, Fault) and prev.reason == reason:  # one record for a run of like faults
            out[-1] = Fault(reason, prev.nbytes + nbytes, prev.units + 1)
        else:
            out.append(Fault(reason, nbytes))
        if self.form is None:
            return False
        self._bad_units += 1
        self._bad_bytes += nbytes
        if self._bad_units >= REDETECT_FAULTS or self._bad_bytes >= REDETECT_BYTES:
            self.form = None
            self._expected_seq = None
            self._ctx.check_level = CHECK_NONE  # a sampler that restarted may be an older one
            self._bad_units = self._bad_bytes = 0
            return True
        return False

    def _good(self, rec: Record) -> None:
        self._bad_units = self._bad_bytes = 0
        c = self.counters
        c.records += 1
        if isinstance(rec, Unknown):
            c.unknown += 1
        elif isinstance(rec, Edges):
            self._edges(rec, 1)
            return
        elif isinstance(rec, Announce):
            ctx = self._ctx
            ctx.version = rec.version
            ctx.counter_bits = rec.counter_bits
            ctx.channels = rec.channels
            if rec.version >= 2:
                ctx.check_level = CHECK_CRC
        self._out.append(rec)

    def _edges(self, rec: Edges, units: int) -> None:
        """Append an edge batch decoded from `units` lines or frames, joined to a batch just before it."""
        c = self.counters
        c.records += units
        c.edges += len(rec.tick)
        out = self._out
        prev = out[-1] if out else None
        if isinstance(prev, Edges):
            out[-1] = Edges(
                np.concatenate([prev.channel, rec.channel]),
                np.concatenate([prev.level, rec.level]),
                np.concatenate([prev.tick, rec.tick]),
            )
        else:
            out.append(rec)

    def _skip_to(self, buf: bytes, terminator: bytes) -> bytes | None:
        """While skipping an over-long unit: the bytes after it, or None when it has not ended yet.

        A unit that runs on past the 4 KiB fault budget is given up at that point (a sampler now speaking
        the other form may never send this form's terminator), and what follows is looked at afresh.
        """
        reason = TOO_LONG if terminator == b"\n" else LONG_FRAME
        budget = max(1, REDETECT_BYTES - self._bad_bytes - self._skipped)
        end = buf.find(terminator)
        if 0 <= end < budget:
            nbytes, rest = self._skipped + end + 1, buf[end + 1 :]
        elif len(buf) < budget:
            self._skipped += len(buf)
            return None
        else:
            nbytes, rest = self._skipped + budget, buf[budget:]
        self._skipping = False
        self._skipped = 0
        self._fault(reason, nbytes)
        return rest

    # -- undecided ------------------------------------------------------------------------------------

    def _valid_frame(self, seg: bytes) -> bool:
        if not 0 < len(seg) <= MAX_ENCODED:
            return False
        try:
            frame = cobs_decode(seg)
        except DecodeError:
            return False
        return 7 <= len(frame) <= MAX_FRAME and zlib.crc32(frame[:-4]) == int.from_bytes(frame[-4:], "little")

    def _detect(self, buf: bytes) -> bytes:
        frame_start = line_start = 0
        found: tuple[str, int] | None = None
        idle = 0
        blanks: list[tuple[int, int]] = []  # empty lines (where they end, their bytes): delimiters too
        for m in _TERMINATOR.finditer(buf):
            p = m.start()
            if buf[p] == 0:
                if p == frame_start:  # an empty frame: a delimiter sent to mark where frames start
                    idle += 1
                elif self._valid_frame(buf[frame_start:p]):
                    found = ("packed", frame_start)
                    break
                frame_start = line_start = p + 1
            else:
                line = buf[line_start : p - 1 if p > line_start and buf[p - 1] == 13 else p]
                rec = parse_line(line, self._ctx)[0]
                if not isinstance(rec, str | Unknown):
                    found = ("line", line_start)
                    break
                if rec == EMPTY:
                    blanks.append((p + 1, p + 1 - line_start))
                line_start = p + 1
        self._idle += idle  # every one of them lies before frame_start, so before keep and start
        if found is None:
            keep = max(frame_start, len(buf) - MAX_ENCODED)
            self._blank += sum(n for end, n in blanks if end <= keep)  # the rest is read again
            self._undecided += keep
            if self._undecided >= REDETECT_BYTES:  # report long noise now, not only once it ends
                if self._undecided > self._idle + self._blank:
                    self._fault(BEFORE_FIRST, self._undecided - self._idle - self._blank)
                self._undecided = self._idle = self._blank = 0
            return buf[keep:]
        self.form, start = found
        self._form_asked = None
        self._undecided += start
        self._blank += sum(n for end, n in blanks if end <= start)
        # delimiters ahead of the first record are how a stream starts, not noise: 0x00 before a
        # packed frame, an empty line before a line
        noise = self._undecided - (self._idle if self.form == "packed" else self._blank)
        if noise:
            self._fault(BEFORE_FIRST, noise)
        self._undecided = self._idle = self._blank = 0
        self._bad_units = self._bad_bytes = 0
        return buf[start:]

    # -- line form ------------------------------------------------------------------------------------

    def _lines(self, buf: bytes) -> bytes:
        if self._skipping:
            rest = self._skip_to(buf, b"\n")
            if rest is None or self.form != "line":
                return rest or b""
            buf = rest
        last = buf.rfind(b"\n")
        if last < 0:
            return self._hold(buf, MAX_LINE_V2 + 1, b"\n")
        body, tail = buf[: last + 1], buf[last + 1 :]
        while body:
            cut, lines = self._block_end(body)
            rest = self._line_block(body[:cut], lines)
            if rest is not None:  # back to undecided
                return rest + body[cut:] + tail
            body = body[cut:]
        return self._hold(tail, MAX_LINE_V2 + 1, b"\n")

    def _block_end(self, body: bytes) -> tuple[int, tuple[np.ndarray, ...] | None]:
        """How many bytes of `body` (whole lines) decode with the context as it is now: up to and
        including the first line that may change it (an announcement, a stronger check than the stream
        has carried). So results never depend on how the stream was split into reads. With it, the
        block's lines (`_line_lines`) when they were found for it."""
        a = np.frombuffer(body, np.uint8)
        lines = _line_lines(a)
        nl, starts, ends = lines
        level = self._ctx.check_level
        changes = a[starts] == 0x41
        if level == CHECK_XOR:
            changes |= (ends - starts >= 7) & (a[np.maximum(ends - 7, 0)] == 0x2A)
        elif level == CHECK_NONE and b"*" in body:
            length = ends - starts
            changes |= (length >= 3) & (a[np.maximum(ends - 3, 0)] == 0x2A)
            changes |= (length >= 7) & (a[np.maximum(ends - 7, 0)] == 0x2A)
        hit = np.flatnonzero(changes[:-1])  # the last line ends the block anyway
        if not len(hit):
            return len(body), lines
        return int(nl[hit[0]]) + 1, None

    def _line_block(self, body: bytes, lines: tuple[np.ndarray, ...] | None = None) -> bytes | None:
        """Decode whole lines with one context; the unread rest when a fault run ends the line form."""
        a = np.frombuffer(body, np.uint8)
        nl, starts, ends = _line_lines(a) if lines is None else lines
        ctx = self._ctx
        fast, is_drive, channel, level, tick, kind = fast_edge_lines(a, starts, ends, nl, ctx)
        if len(kind):
            ctx.check_level = max(ctx.check_level, int(kind.max()))  # only the block's last line can raise
        n_lines = len(nl)
        is_fast = np.zeros(n_lines + 1, bool)
        is_fast[fast] = True
        breaks = np.flatnonzero(~is_fast)  # every line but a fast edge or drive line, and the sentinel
        row_kind = is_drive.astype(np.uint8) * np.uint8(BLOCK_DRIVE)
        drives_before = np.zeros(len(fast) + 1, np.int64)
        np.cumsum(is_drive.astype(np.int64), out=drives_before[1:])
        no_cycle = np.full(int(drives_before[-1]), -1, np.int64)
        taken = 0  # rows of the fast arrays already counted
        block_from = 0  # rows of the fast arrays not yet in an emitted block
        beats: list[Beat] = []  # version 1 beats among them, and how many fast rows precede each
        beat_at: list[int] = []
        prev = 0
        c = self.counters

        def emit() -> None:
            nonlocal block_from, beats, beat_at
            if taken == block_from and not beats:
                return
            r = slice(block_from, taken)
            n_drives = int(drives_before[taken] - drives_before[block_from])
            kinds, chans, levels, ticks = row_kind[r], channel[r], level[r], tick[r]
            if beats:  # the beats as rows of the block, where they came, as the packed form gives them
                kinds, chans, levels, ticks = _with_beats(
                    np.asarray(beat_at, np.intp), [b.tick for b in beats], kinds, chans, levels, ticks
                )
            captured = np.array([b.captured for b in beats], np.int64)
            dropped = np.array([b.dropped for b in beats], np.int64)
            self._out.append(Block(kinds, chans, levels, ticks, no_cycle[:n_drives], captured, dropped))
            block_from, beats, beat_at = taken, [], []

        quick = quick_beats(body, starts, ends, breaks[:-1].tolist(), ctx)
        if len(quick) == len(breaks) - 1:  # every other line a version 1 beat (a clean stream): at once
            self._fast_and_beats(quick, breaks, row_kind, channel, level, tick, no_cycle)
            return None
        for j in breaks.tolist():
            if j > prev:
                k = j - prev
                n_drives = int(drives_before[taken + k] - drives_before[taken])
                self._bad_units = self._bad_bytes = 0
                c.records += k
                c.edges += k - n_drives
                taken += k
            if j == n_lines:
                break
            prev = j + 1
            line_start = int(starts[j])
            got = quick.get(j)
            if got is not None:
                rec, check = Beat(*got[:3]), got[3]
            else:
                rec, check = parse_line(body[line_start : int(ends[j])], ctx)
            if isinstance(rec, Beat) and rec.short is None:  # goes into the block: no break in it
                ctx.check_level = max(ctx.check_level, check)
                self._bad_units = self._bad_bytes = 0
                c.records += 1
                beats.append(rec)
                beat_at.append(taken - block_from)
                continue
            emit()
            if rec == EMPTY:  # a version 2 sampler's delimiter after a reset: nothing, and not a fault
                continue
            if isinstance(rec, str):
                line_end = int(nl[j]) + 1
                if self._fault(rec, line_end - line_start):
                    return body[line_end:]
            else:
                ctx.check_level = max(ctx.check_level, check)
                self._good(rec)
        emit()
        return None

    def _fast_and_beats(
        self,
        quick: dict[int, tuple[int, int, int, int]],
        breaks: np.ndarray,
        kinds: np.ndarray,
        chans: np.ndarray,
        levels: np.ndarray,
        ticks: np.ndarray,
        no_cycle: np.ndarray,
    ) -> None:
        """`_line_block` where every line is a fast edge or drive line or a version 1 beat (`quick`, by
        line, in line order): what its loop gives, as one block (the beats where they came)."""
        n_fast = len(ticks)
        if not n_fast and not quick:
            return
        c = self.counters
        self._bad_units = self._bad_bytes = 0
        c.records += n_fast + len(quick)
        c.edges += n_fast - len(no_cycle)
        beats = list(quick.values())
        if beats:
            self._ctx.check_level = max(self._ctx.check_level, max(b[3] for b in beats))
            at = breaks[:-1] - np.arange(len(beats))  # fast rows before each beat
            kinds, chans, levels, ticks = _with_beats(at, [b[0] for b in beats], kinds, chans, levels, ticks)
        captured = np.array([b[1] for b in beats], np.int64)
        dropped = np.array([b[2] for b in beats], np.int64)
        self._out.append(Block(kinds, chans, levels, ticks, no_cycle, captured, dropped))

    def _hold(self, tail: bytes, limit: int, terminator: bytes) -> bytes:
        """Keep an unfinished unit, or start skipping it when it is already too long."""
        if len(tail) <= limit:
            return tail
        self._skipping = True
        self._skipped = 0
        return self._skip_to(tail, terminator) or b""

    # -- packed form ----------------------------------------------------------------------------------

    def _frames(self, buf: bytes) -> bytes:
        if self._skipping:
            rest = self._skip_to(buf, b"\0")
            if rest is None or self.form != "packed":
                return rest or b""
            buf = rest
        last = buf.rfind(b"\0")
        if last < 0:
            return self._hold(buf, MAX_ENCODED, b"\0")
        body, tail = buf[: last + 1], buf[last + 1 :]
        while body:
            rest = self._frame_block(body)
            if rest is None:
                break
            if self.form != "packed":
                return rest + tail
            body = rest  # an announcement changed what the rest means: look at it afresh
        return self._hold(tail, MAX_ENCODED, b"\0")

    def _frame_block(self, body: bytes) -> bytes | None:
        """Whole frames (`body` ends with 0x00). Plain frames (edges, drives, version 1 beats, intact and
        in sequence) are decoded all at once into `Block`s; any other frame goes through
        `_slow_segments`. Returns None when all of `body` was used, else the part not yet decoded:
        after an announcement (it changes the context) or when faults ended the packed form."""
        if len(body) < BULK_BYTES:  # a live port's small read: numpy's fixed costs would dominate
            segments = body[:-1].split(b"\0")
            i = self._slow_segments(segments)
            return None if i is None else b"\0".join(segments[i + 1 :]) + b"\0"
        a = np.frombuffer(body, np.uint8)
        z = np.flatnonzero(a == 0)
        starts = np.empty_like(z)
        starts[0] = 0
        starts[1:] = z[:-1] + 1
        used = z > starts  # a bare 0x00 is an idle delimiter
        seg_s, seg_e = starts[used], z[used]
        plan = _scan_frames(a, seg_s, seg_e, self._ctx)
        simple, seq = plan.simple, plan.seq
        slow_at = np.flatnonzero(~simple).tolist()
        n = len(seg_s)
        ctx = self._ctx
        context = (ctx.version, ctx.counter_bits, ctx.channels)
        i = 0
        while i < n:
            k = bisect.bisect_left(slow_at, i)
            j = slow_at[k] if k < len(slow_at) else n
            if j > i:
                expected = self._expected_seq
                if expected is not None and int(seq[i]) != expected:
                    j = i  # a gap before the run: its first frame goes the slow way, which reports it
                else:
                    if self._after_outage:
                        self._after_outage = False
                        self.sequence_kept = None if expected is None else True
                    self._emit_block(plan, i, j)
                    self._expected_seq = (int(seq[j - 1]) + 1) & 0xFFFF
                    self._bad_units = self._bad_bytes = 0
            if j >= n:
                break
            seg = body[int(seg_s[j]) : int(seg_e[j])]
            if self._slow_segments([seg]) is not None:
                return body[int(seg_e[j]) + 1 :]
            if (ctx.version, ctx.counter_bits, ctx.channels) != context:
                return body[int(seg_e[j]) + 1 :] or None
            i = j + 1
        return None

    def _emit_block(self, plan: _FramePlan, i: int, j: int) -> None:
        r0, r1 = int(plan.row_start[i]), int(plan.row_start[j])
        d0, d1 = int(plan.drive_start[i]), int(plan.drive_start[j])
        b0, b1 = int(plan.beat_start[i]), int(plan.beat_start[j])
        kind = plan.kind[r0:r1]
        block = Block(
            kind,
            plan.channel[r0:r1],
            plan.level[r0:r1],
            plan.tick[r0:r1],
            plan.cycle[d0:d1],
            plan.captured[b0:b1],
            plan.dropped[b0:b1],
        )
        c = self.counters
        c.records += j - i
        c.edges += (r1 - r0) - (d1 - d0) - (b1 - b0)
        self._out.append(block)

    def _slow_segments(self, segments: list[bytes]) -> int | None:
        """Frames one at a time (all but the plain ones `_scan_frames` takes); the index of the segment
        whose fault sent the decoder back to undecided, if one did."""
        heads: list[bytes] = []
        bodies: list[bytes] = []
        out = self._out
        mark_from = len(out)  # markers for `heads` sit at or after this index of the output
        ctx = self._ctx
        crc32, from_bytes = zlib.crc32, int.from_bytes
        for i, seg in enumerate(segments):
            if not seg:
                continue  # a bare 0x00 is an idle delimiter
            reason = None
            if len(seg) > MAX_ENCODED:
                reason = LONG_FRAME
            else:
                try:
                    frame = cobs_decode(seg)
                except DecodeError:
                    reason = COBS
                else:
                    n = len(frame)
                    if n < 7:
                        reason = SHORT_FRAME
                    elif n > MAX_FRAME:
                        reason = LONG_FRAME
                    elif crc32(memoryview(frame)[:-4]) != from_bytes(frame[-4:], "little"):
                        reason = CRC
            if reason is None:
                kind = frame[0]
                seq = frame[1] | (frame[2] << 8)
                expected = self._expected_seq
                self._expected_seq = (seq + 1) & 0xFFFF
                if self._after_outage and kind != TYPE_ANNOUNCE:
                    self._after_outage = False
                    self.sequence_kept = None if expected is None else seq == expected
                if expected is not None and seq != expected and kind != TYPE_ANNOUNCE:
                    lost = (seq - expected) & 0xFFFF
                    self.counters.frames_lost += lost
                    self._out.append(SequenceGap(expected, seq, lost))
                if kind == TYPE_EDGES:
                    count = frame[11] if n >= 12 else 0
                    size = 16 + 3 * count
                    if count and (n == size or (ctx.version > 1 and n > size)):
                        last_out = out[-1] if out else None
                        if isinstance(last_out, _EdgeRun):
                            last_out.count += 1
                        else:
                            out.append(_EdgeRun(len(heads)))
                        heads.append(frame[3:12])
                        bodies.append(frame[12 : 12 + 3 * count])
                        self._bad_units = self._bad_bytes = 0
                        continue
                    reason = PAYLOAD
                elif kind == TYPE_DRIVE and n == 17:
                    channel, level, tick = frame[3], frame[4], from_bytes(frame[5:13], "little")
                    if channel < ctx.channels and level <= 1 and not tick >> ctx.counter_bits:
                        self._bad_units = self._bad_bytes = 0
                        self.counters.records += 1
                        out.append(Drive(channel, level, tick))
                        continue
                    reason = RANGE
                else:
                    if kind == TYPE_ANNOUNCE:  # it may change the counter width: decode what came before
                        self._flush_edges(heads, bodies, mark_from)
                        mark_from = len(out)
                    rec = self._record(kind, frame[3:-4], ctx.version)
                    if isinstance(rec, str):
                        reason = rec
                    else:
                        self._good(rec)
                        continue
            if self._fault(reason, len(seg) + 1):
                self._flush_edges(heads, bodies, mark_from)
                return i
        self._flush_edges(heads, bodies, mark_from)
        return None

    def _record(self, kind: int, payload: bytes, version: int) -> Record | str:
        n = len(payload)
        later = version > 2
        fixed = _FIXED_PAYLOAD.get(kind)
        if fixed is not None and (n < fixed or (n > fixed and version <= 1)):
            return PAYLOAD
        ctx = self._ctx
        if kind == TYPE_DRIVE:
            # version 1: 10 bytes; version 2 adds the cycle (14); a later version may add more
            if not (n == 10 or n == 14 or (n > 14 and later)):
                return PAYLOAD
            channel, level, tick = payload[0], payload[1], int.from_bytes(payload[2:10], "little")
            if channel >= ctx.channels or level > 1 or tick >> ctx.counter_bits:
                return RANGE
            cycle = int.from_bytes(payload[10:14], "little") if n >= 14 else None
            return Drive(channel, level, tick, cycle)
        if kind == TYPE_BEAT:
            if n < 16 or (16 < n < 21 and not later):
                return PAYLOAD
            tick = int.from_bytes(payload[0:8], "little")
            if tick >> ctx.counter_bits:
                return RANGE
            captured = int.from_bytes(payload[8:12], "little")
            dropped = int.from_bytes(payload[12:16], "little")
            if n == 16 or n < 21:
                return Beat(tick, captured, dropped)
            count = payload[20]
            size = 21 + 5 * count
            if n < size or (n > size and not later):
                return PAYLOAD
            cycles = tuple(
                (payload[i], int.from_bytes(payload[i + 1 : i + 5], "little")) for i in range(21, size, 5)
            )
            chans = [c for c, _ in cycles]
            if any(c >= ctx.channels for c in chans) or chans != sorted(set(chans)):
                return RANGE
            return Beat(tick, captured, dropped, int.from_bytes(payload[16:20], "little"), cycles)
        if kind == TYPE_PLAN_ACCEPTED:
            channel = payload[0]
            on_us, off_us, cycles = (int.from_bytes(payload[i : i + 4], "little") for i in (1, 5, 9))
            if channel >= ctx.channels or not on_us or not off_us:
                return RANGE
            return PlanAccepted(channel, on_us, off_us, cycles)
        if kind == TYPE_GO_ACCEPTED:
            mask, tick = payload[0] | payload[1] << 8, int.from_bytes(payload[2:10], "little")
            if mask >> ctx.channels or tick >> ctx.counter_bits:
                return RANGE
            return GoAccepted(tuple(c for c in range(16) if mask >> c & 1), tick)
        if kind == TYPE_PONG:
            return Pong(int.from_bytes(payload[0:2], "little"))
        if kind == TYPE_NOTICE:
            if n > MAX_NOTICE:
                return PAYLOAD
            return Notice(payload.decode("utf-8", errors="replace"))
        if kind == TYPE_ANNOUNCE:
            if not 8 <= n <= 7 + MAX_BOARD_ID:
                return PAYLOAD
            version, clock_hz, bits, channels = (
                payload[0],
                int.from_bytes(payload[1:5], "little"),
                payload[5],
                payload[6],
            )
            board = payload[7:].decode("latin-1")
            if not (version >= 1 and clock_hz >= 1 and 16 <= bits <= 64 and 1 <= channels <= 16):
                return RANGE
            if not check_board_id(board):
                return PAYLOAD
            return Announce(version, clock_hz, bits, channels, board)
        return Unknown(f"0x{kind:02x}")

    def _flush_edges(self, heads: list[bytes], bodies: list[bytes], mark_from: int) -> None:
        """Decode the edge frames gathered so far, all at once, into the places their markers hold."""
        if not heads:
            return
        head = np.frombuffer(b"".join(heads), _EDGE_HEAD)
        entries = np.frombuffer(b"".join(bodies), np.uint8).reshape(-1, 3)
        heads.clear()
        bodies.clear()
        counts = head["count"].astype(np.intp)
        base = head["base"]
        ctx = self._ctx
        chan_level = entries[:, 0]
        channel = chan_level & np.uint8(0x0F)
        level = chan_level >> np.uint8(7)
        delta = entries[:, 1].astype(np.uint64) | (entries[:, 2].astype(np.uint64) << np.uint64(8))
        total = np.cumsum(delta, dtype=np.uint64)
        first = np.zeros(len(counts) + 1, np.intp)
        np.cumsum(counts, out=first[1:])
        starts = first[:-1]
        before = total[starts] - delta[starts]
        tick = np.repeat(base - before, counts) + total
        bad_entry = ((chan_level & np.uint8(0x70)) != 0) | (channel >= ctx.channels)
        bad_frame = np.add.reduceat(bad_entry, starts) > 0
        if ctx.counter_bits < 64:
            tick &= np.uint64((1 << ctx.counter_bits) - 1)
            bad_frame |= (base >> np.uint64(ctx.counter_bits)) != 0
        c = self.counters
        any_bad = bool(bad_frame.any())
        out = self._out
        rebuilt: list[Record] = []
        for item in out[mark_from:]:
            if not isinstance(item, _EdgeRun):
                rebuilt.append(item)
                continue
            f0, f1 = item.first, item.first + item.count
            if not any_bad or not bad_frame[f0:f1].any():
                s, e = first[f0], first[f1]
                rebuilt.append(Edges(channel[s:e], level[s:e], tick[s:e]))
                c.records += item.count
                c.edges += int(e - s)
                continue
            # rare: a CRC-valid frame with impossible content from a faulty sampler; keep frame order
            for f in range(f0, f1):
                s, e = first[f], first[f + 1]
                if bad_frame[f]:
                    nbytes = 16 + 3 * int(counts[f])
                    c.faults += 1
                    c.fault_bytes += nbytes
                    c.by_reason[RANGE] = c.by_reason.get(RANGE, 0) + 1
                    rebuilt.append(Fault(RANGE, nbytes))
                else:
                    rebuilt.append(Edges(channel[s:e], level[s:e], tick[s:e]))
                    c.records += 1
                    c.edges += int(e - s)
        out[mark_from:] = rebuilt


__all__ = ["Decoder", "MAX_FRAME", "MAX_LINE", "MAX_EDGES_PER_FRAME"]
