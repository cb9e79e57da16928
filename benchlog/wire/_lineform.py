"""Line-form parsing: one line at a time (rare records, faults) and vectorised (edge lines).

The vectorised path takes a buffer of whole lines and finds every well-formed `E` line with numpy: fixed
fields by position, 1-16 hex tick digits by a per-digit-column gather, `*hh` checksums from a prefix XOR
of the whole buffer. Anything it does not accept goes through `parse_line`, which either decodes it (a
drive, a beat, an edge line with extra fields from a later protocol version) or names the fault.
"""

from __future__ import annotations

import re

import numpy as np

from benchlog.wire._encoders import MAX_NOTICE, check_board_id
from benchlog.wire._framing import crc16, crc16_spans
from benchlog.wire._records import (
    Announce,
    Beat,
    Drive,
    Edges,
    GoAccepted,
    Notice,
    PlanAccepted,
    Pong,
    Record,
    Unknown,
)

MAX_LINE = 160  # a line without a check or with the version 1 `*hh` check
MAX_BODY_V2 = 255  # the bytes before `*` of a line with the version 2 `*LLCCCC` check
MAX_LINE_V2 = MAX_BODY_V2 + 7

# strength of a line's check; a stream is held to the strongest it has carried (docs/protocol.md)
CHECK_NONE, CHECK_XOR, CHECK_CRC = 0, 1, 2

HEX_VALUE = np.full(256, 255, np.uint8)
for _i, _c in enumerate(b"0123456789abcdef"):
    HEX_VALUE[_c] = _i
for _i, _c in enumerate(b"ABCDEF"):
    HEX_VALUE[_c] = 10 + _i

_HEX = re.compile(r"[0-9a-fA-F]{1,16}")
_HEX8 = re.compile(r"[0-9a-fA-F]{1,8}")
_DEC = re.compile(r"[0-9]{1,10}")
_CHECK = re.compile(r"[0-9a-fA-F]{2}")
_CHECK_V2 = re.compile(rb"[0-9a-fA-F]{6}")
_U32 = 2**32
_BEAT_V1 = re.compile(rb"B ([0-9a-fA-F]{1,16}) ([0-9]{1,10}) ([0-9]{1,10})(?:\*([0-9a-fA-F]{2}))?")

# fault reasons
CHECKSUM = "checksum"
MISSING_CHECK = "checksum missing"
SYNTAX = "syntax"
TOO_LONG = "line too long"
NOT_TEXT = "not printable ASCII"
EMPTY = "empty line"
RANGE = "value out of range"


class LineContext:
    """What parsing needs from the last announcement, and the check the stream is held to."""

    __slots__ = ("version", "counter_bits", "channels", "check_level")

    def __init__(self) -> None:
        self.version = 1
        self.counter_bits = 64
        self.channels = 16
        self.check_level = CHECK_NONE


def _xor(text: bytes) -> int:
    x = 0
    for b in text:
        x ^= b
    return x


def line_check(body: bytes) -> bytes:
    """The version 2 check of a line body: `*`, its length (2 hex digits), its CRC-16 (4 hex digits)."""
    return b"*%02x%04x" % (len(body), crc16(body))


def split_check(line: bytes) -> tuple[bytes, int] | str:
    """(body, check strength) of a line without its `\r\n`, or the fault reason when its check fails."""
    n = len(line)
    if n >= 7 and line[-7] == 0x2A and _CHECK_V2.fullmatch(line, n - 6):
        body = line[:-7]
        if int(line[-6:-4], 16) != len(body) or int(line[-4:], 16) != crc16(body):
            return CHECKSUM
        return body, CHECK_CRC
    if n > MAX_LINE:
        return TOO_LONG
    if n >= 3 and line[-3] == 0x2A:  # "*hh"
        body = line[:-3]
        check = line[-2:].decode("ascii")
        if not _CHECK.fullmatch(check) or _xor(body) != int(check, 16):
            return CHECKSUM
        return body, CHECK_XOR
    return line, CHECK_NONE


def parse_line(line: bytes, ctx: LineContext) -> tuple[Record | str, int]:
    """One line without its `\r\n`: (the record or the fault reason, the strength of its check)."""
    if len(line) > MAX_LINE_V2:
        return TOO_LONG, CHECK_NONE
    if not line:
        return EMPTY, CHECK_NONE
    if not (line.isascii() and line.decode("ascii").isprintable()):
        return NOT_TEXT, CHECK_NONE
    checked = split_check(line)
    if isinstance(checked, str):
        return checked, CHECK_NONE
    line, kind = checked
    if kind < ctx.check_level:
        return MISSING_CHECK, kind
    if not line:
        return SYNTAX, kind
    return _parse_body(line.decode("ascii"), ctx, kind), kind


def _parse_body(text: str, ctx: LineContext, kind: int) -> Record | str:
    code = text[0]
    if not ("A" <= code <= "Z" or "a" <= code <= "z"):
        return SYNTAX
    if code == "N":
        if len(text) > 1 and text[1] != " ":
            return SYNTAX
        body = text[2:]
        return Notice(body) if len(body) <= MAX_NOTICE else TOO_LONG
    fields = text.split(" ")
    # a version 2 check proves a version 2 sampler even when its announcement was missed
    version = max(ctx.version, 2 if kind == CHECK_CRC else 1)
    later = ctx.version > 2
    if code == "E" or code == "D":
        n = 5 if code == "D" and version >= 2 else 4
        if len(fields) < n or (len(fields) > n and not later):
            return SYNTAX
        ch, lv, tk = fields[1:4]
        if not (len(ch) == 1 and _HEX.fullmatch(ch) and lv in ("0", "1") and _HEX.fullmatch(tk)):
            return SYNTAX
        channel, level, tick = int(ch, 16), int(lv), int(tk, 16)
        if channel >= ctx.channels or tick >> ctx.counter_bits:
            return RANGE
        if code == "D":
            if n == 5:
                if not _DEC.fullmatch(fields[4]):
                    return SYNTAX
                cycle = int(fields[4])
                return Drive(channel, level, tick, cycle) if cycle < _U32 else RANGE
            return Drive(channel, level, tick)
        return Edges(np.array([channel], np.uint8), np.array([level], np.uint8), np.array([tick], np.uint64))
    if code == "B":
        n = 5 if version >= 2 else 4
        if len(fields) < n or (len(fields) > 4 and version < 2):
            return SYNTAX
        tk, cap, drop = fields[1:4]
        if not (_HEX.fullmatch(tk) and _DEC.fullmatch(cap) and _DEC.fullmatch(drop)):
            return SYNTAX
        tick, captured, dropped = int(tk, 16), int(cap), int(drop)
        if tick >> ctx.counter_bits or captured >= _U32 or dropped >= _U32:
            return RANGE
        if n == 4:
            return Beat(tick, captured, dropped)
        if not _DEC.fullmatch(fields[4]):
            return SYNTAX
        short = int(fields[4])
        counts = _cycle_counts(fields[5:], ctx.channels, later)
        if isinstance(counts, str):
            return counts
        return Beat(tick, captured, dropped, short, counts) if short < _U32 else RANGE
    if code == "K":
        if (
            len(fields) < 5
            or (len(fields) > 5 and not later)
            or not all(_DEC.fullmatch(f) for f in fields[1:5])
        ):
            return SYNTAX
        channel, on_us, off_us, cycles = (int(f) for f in fields[1:5])
        if channel >= ctx.channels or not (0 < on_us < _U32 and 0 < off_us < _U32 and cycles < _U32):
            return RANGE
        return PlanAccepted(channel, on_us, off_us, cycles)
    if code == "G":
        if len(fields) < 3 or (len(fields) > 3 and not later):
            return SYNTAX
        mask, tk = fields[1:3]
        if not (len(mask) <= 4 and _HEX.fullmatch(mask) and _HEX.fullmatch(tk)):
            return SYNTAX
        bits, tick = int(mask, 16), int(tk, 16)
        if bits >> ctx.channels or tick >> ctx.counter_bits:
            return RANGE
        return GoAccepted(tuple(c for c in range(16) if bits >> c & 1), tick)
    if code == "P":
        if len(fields) < 2 or (len(fields) > 2 and not later) or not _DEC.fullmatch(fields[1]):
            return SYNTAX
        token = int(fields[1])
        return Pong(token) if token <= 0xFFFF else RANGE
    if code == "A":
        if len(fields) < 6 or not all(_DEC.fullmatch(f) for f in fields[1:5]):
            return SYNTAX
        version, clock_hz, bits, channels = (int(f) for f in fields[1:5])
        if len(fields) > 6 and version <= 2:
            return SYNTAX
        board = fields[5]
        if not (1 <= version <= 255 and 1 <= clock_hz < _U32 and 16 <= bits <= 64 and 1 <= channels <= 16):
            return RANGE
        if not check_board_id(board):
            return SYNTAX
        if version >= 2 and kind < CHECK_CRC:
            return MISSING_CHECK  # a version 2 sampler checks every line
        return Announce(version, clock_hz, bits, channels, board)
    return Unknown(code)


def _cycle_counts(words: list[str], channels: int, later: bool) -> tuple[tuple[int, int], ...] | str:
    """`c:n` words of a version 2 beat: channel (one hex digit), cycles (hex, 1-8 digits), channels
    ascending."""
    out = []
    last = -1
    for w in words:
        ch, sep, n = w.partition(":")
        if not (sep and len(ch) == 1 and _HEX.fullmatch(ch) and _HEX8.fullmatch(n)):
            if later:
                break
            return SYNTAX
        c = int(ch, 16)
        if c <= last or c >= channels:
            return RANGE
        last = c
        out.append((c, int(n, 16)))
    return tuple(out)


def fast_edge_lines(
    a: np.ndarray,
    starts: np.ndarray,
    ends: np.ndarray,
    newlines: np.ndarray,
    ctx: LineContext,
    *,
    same_width: bool = True,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Vectorised `E` and version 1 `D` lines (same layout), with any of the three checks.

    `a` is the buffer, `starts`/`ends` bound each line (without `\\r\\n`), `newlines` are the
    positions of the `\\n`s. `same_width=False` reads each field of each line on its own even when
    the lines are all one width (tests compare the two ways).

    Returns (line indices accepted, is_drive, channel, level, tick, check strength), in line order.
    """
    length = ends - starts
    first = a[starts]
    cand = np.flatnonzero((length >= 7) & (length <= 29) & ((first == 0x45) | (first == 0x44)))
    if same_width and len(cand) >= 2:
        widths = length[cand]
        width = int(widths[0])
        if (widths == width).all():  # a sampler writes fixed-width ticks: a clean stream's usual case
            got = _same_width_rows(a, starts[cand], width, first[cand], ctx)
            if got is not None:
                ok, is_drive, channel, level, tick, kind = got
                if ok.all():  # a clean stream: every candidate line is taken
                    return cand, is_drive, channel, level, tick, kind
                rows = np.flatnonzero(ok)  # one index array for every column: quicker than the mask
                return (
                    cand.take(rows),
                    is_drive.take(rows),
                    channel.take(rows),
                    level.take(rows),
                    tick.take(rows),
                    kind.take(rows),
                )
    line_xor = np.bitwise_xor.reduceat(a, starts)  # of each whole line, its `\\n` included
    s, e = starts[cand], ends[cand]
    ok = (a[s + 1] == 0x20) & (a[s + 3] == 0x20) & (a[s + 5] == 0x20)
    channel = HEX_VALUE[a[s + 2]]
    ok &= channel < ctx.channels
    level = a[s + 4] - np.uint8(0x30)
    ok &= level <= 1
    has_crc = (e - s >= 13) & (a[e - 7] == 0x2A)
    starred = np.flatnonzero(has_crc)  # read the six digits after a version 2 `*` on those lines only
    check_digits = [HEX_VALUE[a[e[starred] - k]] for k in range(6, 0, -1)]
    for d in check_digits:
        has_crc[starred] &= d < 16
    has_xor = ~has_crc & (a[e - 3] == 0x2A)
    kind = np.where(has_crc, CHECK_CRC, np.where(has_xor, CHECK_XOR, CHECK_NONE))
    ok &= kind >= ctx.check_level
    # a version 2 drive carries its cycle: never the four-field layout of this fast path
    ok &= ~((first[cand] == 0x44) & (has_crc | (ctx.version >= 2)))
    tick_end = np.where(has_crc, e - 7, np.where(has_xor, e - 3, e))
    ndig = tick_end - (s + 6)
    ok &= (ndig >= 1) & (ndig <= 16)
    hi, lo = HEX_VALUE[a[e - 2]], HEX_VALUE[a[e - 1]]
    # XOR of the bytes before '*': the whole line's XOR without '*', the two digits, '\r' and '\n'
    cr = np.where(e != newlines[cand], np.uint8(0x0D), np.uint8(0))
    xor = line_xor[cand] ^ a[e - 3] ^ a[e - 2] ^ a[e - 1] ^ cr ^ np.uint8(0x0A)
    ok &= ~has_xor | ((hi < 16) & (lo < 16) & (xor == ((hi << 4) | lo)))
    if has_crc.any():
        crc_rows = np.flatnonzero(has_crc & ok)
        in_starred = np.searchsorted(starred, crc_rows)
        digits = [d[in_starred] for d in check_digits]
        body_len = (tick_end - s)[crc_rows]
        said_len = (digits[0].astype(np.int64) << 4) | digits[1]
        said_crc = np.zeros(len(crc_rows), np.uint16)
        for d in digits[2:]:
            said_crc = (said_crc << np.uint16(4)) | d.astype(np.uint16)
        good = (said_len == body_len) & (crc16_spans(a, s[crc_rows], body_len) == said_crc)
        ok[crc_rows[~good]] = False
    tick = np.zeros(len(cand), np.uint64)
    if not len(cand):
        return cand, cand.astype(bool), channel, level, tick, kind
    max_digits = int(ndig.max())
    if max_digits == int(ndig.min()):  # the usual case: every tick has the same width; no masking
        for k in range(1, max_digits + 1):
            digit = HEX_VALUE[a[tick_end - k]]
            ok &= digit < 16
            tick |= digit.astype(np.uint64) << np.uint64(4 * (k - 1))
    else:
        max_digits = min(max_digits, 16)
        for k in range(1, max_digits + 1):
            digit = HEX_VALUE[a[np.maximum(tick_end - k, 0)]]
            used = ndig >= k
            ok &= ~used | (digit < 16)
            tick |= np.where(used, digit, 0).astype(np.uint64) << np.uint64(4 * (k - 1))
    if ctx.counter_bits < 64:
        ok &= (tick >> np.uint64(ctx.counter_bits)) == 0
    return cand[ok], first[cand[ok]] == 0x44, channel[ok], level[ok], tick[ok], kind[ok]


def _hex_digits(t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(value, is a hex digit) of every byte of `t` (ASCII `0-9`, `a-f`, `A-F`), by arithmetic: on
    contiguous bytes a few passes cost less than a table lookup per byte."""
    num = t - np.uint8(0x30)
    letter = (t | np.uint8(0x20)) - np.uint8(0x57)  # 'a' -> 10 (and 'A', folded to lower case)
    is_num = num < np.uint8(10)
    # num where is_num, else letter (all bits of the mask set where is_num; np.where is slower)
    value = letter ^ ((letter ^ num) & (np.uint8(0) - is_num.view(np.uint8)))
    return value, is_num | (letter - np.uint8(10) < np.uint8(6))


def _same_width_rows(
    a: np.ndarray, s: np.ndarray, width: int, first: np.ndarray, ctx: LineContext
) -> tuple[np.ndarray, ...] | None:
    """`fast_edge_lines` for candidate lines that are all `width` bytes long (without `\\r\\n`).

    The lines are copied once into a matrix (a gather of `width`-byte rows through a view of the
    buffer as overlapping `width`-byte items), turned so that each byte position of the lines is one
    contiguous row, and every field is read from those rows, where the general path gathers each
    field of each line from the buffer on its own. The same checks, line by line. Returns (accepted,
    is_drive, channel, level, tick, check strength) per candidate, or None when the lines do not share
    one check layout (the general path then reads each line's own)."""
    n = len(s)
    rows = np.ndarray((len(a) - width + 1,), np.dtype((np.void, width)), a, 0, (1,))
    t = np.ascontiguousarray(rows[s].view(np.uint8).reshape(n, width).T)  # t[k]: byte k of every line
    kind = CHECK_NONE
    crc_digits = None
    if width >= 13 and (t[width - 7] == 0x2A).any():
        crc_digits, is_hex = _hex_digits(t[width - 6 :])
        has_crc = (t[width - 7] == 0x2A) & is_hex.all(axis=0)
        if has_crc.all():
            kind = CHECK_CRC
        elif has_crc.any():
            return None
    if kind == CHECK_NONE:  # (every candidate is at least 7 bytes long)
        has_xor = t[width - 3] == 0x2A
        if has_xor.all():
            kind = CHECK_XOR
        elif has_xor.any():
            return None
    kinds = np.full(n, kind, np.int64)
    tick_end = width - 7 if kind == CHECK_CRC else width - 3 if kind == CHECK_XOR else width
    ndig = tick_end - 6
    if kind < ctx.check_level or not 1 <= ndig <= 16:
        nothing = np.zeros(n, bool)
        return nothing, nothing, t[2], t[4], np.zeros(n, np.uint64), kinds
    ok = (t[1] == 0x20) & (t[3] == 0x20) & (t[5] == 0x20)
    channel, is_hex = _hex_digits(t[2])
    ok &= is_hex & (channel < ctx.channels)
    level = t[4] - np.uint8(0x30)
    ok &= level <= 1
    is_drive = first == 0x44
    if kind == CHECK_CRC or ctx.version >= 2:  # a version 2 drive carries its cycle: not this layout
        ok &= ~is_drive
    digits, is_hex = _hex_digits(t[6:tick_end])
    ok &= is_hex.all(axis=0)
    # the tick's bytes, most significant first (two digits a byte; an odd count's first digit alone),
    # laid side by side and read as one big-endian word per line
    pairs = [digits[0]] if ndig % 2 else []
    pairs += [digits[k - 1] << np.uint8(4) | digits[k] for k in range(2 if ndig % 2 else 1, ndig, 2)]
    size = next(w for w in (1, 2, 4, 8) if w >= len(pairs))
    word = np.zeros((n, size), np.uint8)
    for i, byte in enumerate(pairs, size - len(pairs)):
        word[:, i] = byte
    tick = word.view(f">u{size}").reshape(n).astype(np.uint64)
    if kind == CHECK_XOR:
        xor = np.bitwise_xor.reduce(t[: width - 3], axis=0)
        said, is_hex = _hex_digits(t[width - 2 :])
        ok &= is_hex.all(axis=0) & (xor == (said[0] << np.uint8(4) | said[1]))
    elif kind == CHECK_CRC:
        said_len = crc_digits[0].astype(np.int64) << 4 | crc_digits[1]
        said_crc = np.zeros(n, np.uint16)
        for k in range(2, 6):
            said_crc = said_crc << np.uint16(4) | crc_digits[k]
        body_len = width - 7
        ok &= said_len == body_len
        rows_ok = np.flatnonzero(ok)
        good = crc16_spans(a, s[rows_ok], np.full(len(rows_ok), body_len, np.int64)) == said_crc[rows_ok]
        ok[rows_ok[~good]] = False
    if ctx.counter_bits < 64:
        ok &= (tick >> np.uint64(ctx.counter_bits)) == 0
    return ok, is_drive, channel, level, tick, kinds


def quick_beats(
    body: bytes, starts: np.ndarray, ends: np.ndarray, rows: list[int], ctx: LineContext
) -> dict[int, tuple[int, int, int, int]]:
    """Version 1 beat lines among lines `rows` of `body` (a sampler sends one every few hundred edges):
    {row: (tick, captured, dropped, check strength)} for each line `parse_line` would turn into a
    `Beat` with that strength. The beats sharing the most common layout (a sampler writes its ticks at
    one width, and its counts change width rarely) are read column by column with numpy
    (`_same_layout_beats`); the rest, one regular expression per line and one numpy pass for all their
    `*hh` checks, where `parse_line` goes field by field; any other line is left out, for `parse_line`."""
    if ctx.version != 1 or not rows:
        return {}
    out: dict[int, tuple[int, int, int, int]] = {}
    if len(rows) >= _LAYOUT_MIN:
        rows = _same_layout_beats(body, starts, ends, rows, ctx, out)
        if not rows:
            return out
    found = []
    match = _BEAT_V1.fullmatch
    for j, s, e in zip(rows, starts[rows].tolist(), ends[rows].tolist(), strict=True):
        if body[s] != 0x42:  # "B"
            continue
        m = match(body, s, e)
        if m is not None:
            found.append((j, s, e, m.groups()))
    if not found:
        return out
    by_columns = bool(out)  # some beats were read column by column: the dict is put back in line order
    checked = [f for f in found if f[3][3] is not None]
    xors: list[int] = []
    if checked:
        # each line's bytes before its `*`, gathered side by side, then XORed line by line
        a = np.frombuffer(body, np.uint8)
        first = np.array([s for _, s, _, _ in checked], np.int64)
        size = np.array([e - 3 - s for _, s, e, _ in checked], np.int64)
        at = np.cumsum(size) - size
        joined = a[np.repeat(first - at, size) + np.arange(int(size.sum()))]
        xors = np.bitwise_xor.reduceat(joined, at).tolist()
    xor_of = dict(zip((f[0] for f in checked), xors, strict=True))
    bits, level = ctx.counter_bits, ctx.check_level
    for j, _, _, (tk, cap, drop, check) in found:
        if check is None:
            kind = CHECK_NONE
        elif xor_of[j] == int(check, 16):
            kind = CHECK_XOR
        else:
            continue
        tick, captured, dropped = int(tk, 16), int(cap), int(drop)
        if kind < level or tick >> bits or captured >= _U32 or dropped >= _U32:
            continue
        out[j] = (tick, captured, dropped, kind)
    return dict(sorted(out.items())) if by_columns else out


_BEAT_V1_LONGEST = 43  # "B", 16 hex digits, two counts of 10 digits, three spaces and "*hh"
_LAYOUT_MIN = 8  # beat lines in a block before the column-wise reading pays for its fixed cost
# what each byte of a version 1 beat may be: its letter, a space, a hex or decimal digit, the `*`
_B, _SPACE, _HEXDIGIT, _DECDIGIT, _STAR = range(5)


def _beat_layout(line: bytes) -> list[int] | None:
    """The byte classes of a version 1 beat line laid out as `line` is (`_BEAT_V1`: `B`, a space, 1-16
    hex digits, a space, 1-10 decimal digits, a space, 1-10 decimal digits, optionally `*` and two hex
    digits), or None when `line` is not one."""
    m = _BEAT_V1.fullmatch(line)
    if m is None:
        return None
    tick, cap, drop, check = (len(g) if g is not None else 0 for g in m.groups())
    out = [_B, _SPACE] + [_HEXDIGIT] * tick + [_SPACE] + [_DECDIGIT] * cap + [_SPACE] + [_DECDIGIT] * drop
    return out + ([_STAR, _HEXDIGIT, _HEXDIGIT] if check else [])


def _same_layout_beats(
    body: bytes,
    starts: np.ndarray,
    ends: np.ndarray,
    rows: list[int],
    ctx: LineContext,
    out: dict[int, tuple[int, int, int, int]],
) -> list[int]:
    """The beat lines among `rows` laid out as the first one of the most common length, read column by
    column into `out` (what the one-line-at-a-time reading gives them); returns the rows left for it.

    A line is taken only when every byte is of its column's class (so the expression would match it,
    with these field widths), its `*hh` check holds, the stream's check level allows it and the values
    are in range; any other line is left, and the one-line reading decides it as before."""
    r = np.asarray(rows, np.intp)
    s, e = starts[r], ends[r]
    a = np.frombuffer(body, np.uint8)
    length = e - s
    is_beat = (a[s] == 0x42) & (length <= _BEAT_V1_LONGEST)
    if np.count_nonzero(is_beat) < _LAYOUT_MIN:
        return rows
    width = int(np.bincount(length[is_beat]).argmax())
    pick = np.flatnonzero(is_beat & (length == width))
    layout = None
    for first in s[pick[:3]].tolist():  # the layout of the first whole beat of this length
        layout = _beat_layout(body[first : first + width])
        if layout is not None:
            break
    if layout is None or len(pick) < _LAYOUT_MIN:
        return rows
    cls = np.array(layout, np.uint8)
    lines = np.ndarray((len(a) - width + 1,), np.dtype((np.void, width)), a, 0, (1,))
    m = lines[s[pick]].view(np.uint8).reshape(len(pick), width)
    digit = HEX_VALUE[m]  # 255 where not a hex digit
    want = np.zeros(width, np.uint8)  # the byte each column must be, where it is one byte
    want[cls == _B] = 0x42
    want[cls == _SPACE] = 0x20
    want[cls == _STAR] = 0x2A
    fixed = (cls == _B) | (cls == _SPACE) | (cls == _STAR)
    ok = (m[:, fixed] == want[fixed]).all(axis=1)
    ok &= (digit[:, cls == _HEXDIGIT] < 16).all(axis=1)
    ok &= (digit[:, cls == _DECDIGIT] < 10).all(axis=1)
    spaces = np.flatnonzero(cls == _SPACE).tolist()
    star = width - 3 if layout[-3] == _STAR else width
    tick = np.zeros(len(pick), np.uint64)
    for col in range(spaces[0] + 1, spaces[1]):
        tick = (tick << np.uint64(4)) | digit[:, col].astype(np.uint64)
    counts = []
    for lo, hi in ((spaces[1] + 1, spaces[2]), (spaces[2] + 1, star)):
        v = np.zeros(len(pick), np.int64)
        for col in range(lo, hi):
            v = v * 10 + digit[:, col]
        counts.append(v)
    captured, dropped = counts
    if star < width:
        kind = CHECK_XOR
        said = (digit[:, width - 2].astype(np.int64) << 4) | digit[:, width - 1]
        ok &= np.bitwise_xor.reduce(m[:, :star], axis=1) == said
    else:
        kind = CHECK_NONE
    if kind < ctx.check_level:
        return rows
    if ctx.counter_bits < 64:
        ok &= (tick >> np.uint64(ctx.counter_bits)) == 0
    ok &= (captured < _U32) & (dropped < _U32)
    taken = pick[ok]
    out.update(
        zip(
            r[taken].tolist(),
            zip(
                tick[ok].tolist(),
                captured[ok].tolist(),
                dropped[ok].tolist(),
                [kind] * len(taken),
                strict=True,
            ),
            strict=True,
        )
    )
    if len(taken) == len(r):
        return []
    left = np.ones(len(r), bool)
    left[taken] = False
    return r[left].tolist()
