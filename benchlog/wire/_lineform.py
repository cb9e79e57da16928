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
from benchlog.wire._records import Announce, Beat, Drive, Edges, Notice, Pong, Record, Unknown

MAX_LINE = 160

HEX_VALUE = np.full(256, 255, np.uint8)
for _i, _c in enumerate(b"0123456789abcdef"):
    HEX_VALUE[_c] = _i
for _i, _c in enumerate(b"ABCDEF"):
    HEX_VALUE[_c] = 10 + _i

_HEX = re.compile(r"[0-9a-fA-F]{1,16}")
_DEC = re.compile(r"[0-9]{1,10}")
_CHECK = re.compile(r"[0-9a-fA-F]{2}")
_U32 = 2**32

# fault reasons
CHECKSUM = "checksum"
SYNTAX = "syntax"
TOO_LONG = "line too long"
NOT_TEXT = "not printable ASCII"
EMPTY = "empty line"
RANGE = "value out of range"


class LineContext:
    """What parsing needs from the last announcement."""

    __slots__ = ("version", "counter_bits", "channels")

    def __init__(self) -> None:
        self.version = 1
        self.counter_bits = 64
        self.channels = 16


def _xor(text: bytes) -> int:
    x = 0
    for b in text:
        x ^= b
    return x


def parse_line(line: bytes, ctx: LineContext) -> Record | str:
    """One line without its `\\r\\n`: the record, or the fault reason (a str)."""
    if len(line) > MAX_LINE:
        return TOO_LONG
    if not line:
        return EMPTY
    if not (line.isascii() and line.decode("ascii").isprintable()):
        return NOT_TEXT
    if len(line) >= 3 and line[-3] == 0x2A:  # "*hh"
        check = line[-2:].decode("ascii")
        line = line[:-3]
        if not _CHECK.fullmatch(check) or _xor(line) != int(check, 16):
            return CHECKSUM
        if not line:
            return SYNTAX
    text = line.decode("ascii")
    code = text[0]
    if not ("A" <= code <= "Z" or "a" <= code <= "z"):
        return SYNTAX
    if code == "N":
        if len(text) > 1 and text[1] != " ":
            return SYNTAX
        body = text[2:]
        return Notice(body) if len(body) <= MAX_NOTICE else TOO_LONG
    fields = text.split(" ")
    later = ctx.version > 1
    if code in "ED":
        if len(fields) < 4 or (len(fields) > 4 and not later):
            return SYNTAX
        ch, lv, tk = fields[1:4]
        if not (len(ch) == 1 and _HEX.fullmatch(ch) and lv in ("0", "1") and _HEX.fullmatch(tk)):
            return SYNTAX
        channel, level, tick = int(ch, 16), int(lv), int(tk, 16)
        if channel >= ctx.channels or tick >> ctx.counter_bits:
            return RANGE
        if code == "D":
            return Drive(channel, level, tick)
        return Edges(np.array([channel], np.uint8), np.array([level], np.uint8), np.array([tick], np.uint64))
    if code == "B":
        if len(fields) < 4 or (len(fields) > 4 and not later):
            return SYNTAX
        tk, cap, drop = fields[1:4]
        if not (_HEX.fullmatch(tk) and _DEC.fullmatch(cap) and _DEC.fullmatch(drop)):
            return SYNTAX
        tick, captured, dropped = int(tk, 16), int(cap), int(drop)
        if tick >> ctx.counter_bits or captured >= _U32 or dropped >= _U32:
            return RANGE
        return Beat(tick, captured, dropped)
    if code == "P":
        if len(fields) < 2 or (len(fields) > 2 and not later) or not _DEC.fullmatch(fields[1]):
            return SYNTAX
        token = int(fields[1])
        return Pong(token) if token <= 0xFFFF else RANGE
    if code == "A":
        if len(fields) < 6 or not all(_DEC.fullmatch(f) for f in fields[1:5]):
            return SYNTAX
        version, clock_hz, bits, channels = (int(f) for f in fields[1:5])
        if len(fields) > 6 and version <= 1:
            return SYNTAX
        board = fields[5]
        if not (1 <= version <= 255 and 1 <= clock_hz < _U32 and 16 <= bits <= 64 and 1 <= channels <= 16):
            return RANGE
        if not check_board_id(board):
            return SYNTAX
        return Announce(version, clock_hz, bits, channels, board)
    return Unknown(code)


def fast_edge_lines(
    a: np.ndarray,
    line_xor: np.ndarray,
    starts: np.ndarray,
    ends: np.ndarray,
    newlines: np.ndarray,
    ctx: LineContext,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Vectorised `E` and `D` lines (same layout). `a` is the buffer, `starts`/`ends` bound each line
    (without `\\r\\n`), `newlines` are the positions of the `\\n`s, `line_xor` the XOR of each whole
    line (its `\\n` included).

    Returns (line indices accepted, is_drive, channel, level, tick), in line order.
    """
    length = ends - starts
    first = a[starts]
    cand = np.flatnonzero((length >= 7) & (length <= 25) & ((first == 0x45) | (first == 0x44)))
    s, e = starts[cand], ends[cand]
    ok = (a[s + 1] == 0x20) & (a[s + 3] == 0x20) & (a[s + 5] == 0x20)
    channel = HEX_VALUE[a[s + 2]]
    ok &= channel < ctx.channels
    level = a[s + 4] - np.uint8(0x30)
    ok &= level <= 1
    has_check = a[e - 3] == 0x2A
    tick_end = np.where(has_check, e - 3, e)
    ndig = tick_end - (s + 6)
    ok &= (ndig >= 1) & (ndig <= 16)
    hi, lo = HEX_VALUE[a[e - 2]], HEX_VALUE[a[e - 1]]
    # XOR of the bytes before '*': the whole line's XOR without '*', the two digits, '\r' and '\n'
    cr = np.where(e != newlines[cand], np.uint8(0x0D), np.uint8(0))
    xor = line_xor[cand] ^ a[e - 3] ^ a[e - 2] ^ a[e - 1] ^ cr ^ np.uint8(0x0A)
    ok &= ~has_check | ((hi < 16) & (lo < 16) & (xor == ((hi << 4) | lo)))
    tick = np.zeros(len(cand), np.uint64)
    if not len(cand):
        return cand, cand.astype(bool), channel, level, tick
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
    return cand[ok], first[cand[ok]] == 0x44, channel[ok], level[ok], tick[ok]
