"""Encoders: records to bytes in the line form or the packed form (docs/protocol.md).

Both are vectorised for edge batches: the simulator encodes millions of edges, so an `Edges` batch becomes
one numpy array of line bytes (line form) or one array of 3-byte entries sliced into frames (packed form).
"""

from __future__ import annotations

import struct

import numpy as np

from benchlog.errors import ProtocolError
from benchlog.wire._framing import CRC16_TABLE, cobs_encode, crc16, crc32
from benchlog.wire._records import Announce, Beat, Drive, Edges, GoAccepted, Notice, PlanAccepted, Pong

HEX_DIGITS = np.frombuffer(b"0123456789abcdef", np.uint8)

TYPE_EDGES = 0x01
TYPE_DRIVE = 0x02
TYPE_BEAT = 0x03
TYPE_NOTICE = 0x04
TYPE_PONG = 0x05
TYPE_PLAN_ACCEPTED = 0x06
TYPE_GO_ACCEPTED = 0x07
TYPE_ANNOUNCE = 0x10

MAX_NOTICE = 120
MAX_BOARD_ID = 32
MAX_EDGES_PER_FRAME = 255
MAX_DELTA = 0xFFFF

_EDGES_HEAD = struct.Struct("<BHQB")
_DRIVE = struct.Struct("<BBQ")
_DRIVE_V2 = struct.Struct("<BBQI")
_BEAT = struct.Struct("<QII")
_BEAT_V2 = struct.Struct("<QIIIB")
_CYCLES = struct.Struct("<BI")
_PLAN_ACCEPTED = struct.Struct("<BIII")
_GO_ACCEPTED = struct.Struct("<HQ")
_PONG = struct.Struct("<H")
_ANNOUNCE = struct.Struct("<BIBB")


def _fail(message: str) -> None:
    raise ProtocolError(f"record cannot be sent: {message}")


def check_board_id(board_id: str) -> bool:
    return (
        1 <= len(board_id) <= MAX_BOARD_ID
        and board_id.isascii()
        and board_id.isprintable()
        and " " not in board_id
    )


def _check_announce(rec: Announce) -> None:
    if not 1 <= rec.version <= 0xFF:
        _fail(f"protocol version {rec.version} is not 1-255")
    if not 1 <= rec.clock_hz < 2**32:
        _fail(f"clock {rec.clock_hz} Hz is not 1 to 2**32-1")
    if not 16 <= rec.counter_bits <= 64:
        _fail(f"counter width {rec.counter_bits} bits is not 16-64")
    if not 1 <= rec.channels <= 16:
        _fail(f"channel count {rec.channels} is not 1-16")
    if not check_board_id(rec.board_id):
        _fail(f"board id {rec.board_id!r} is not 1-32 printable ASCII characters without spaces")


def _check_edges(rec: Edges, counter_bits: int) -> np.ndarray:
    n = len(rec.tick)
    if len(rec.channel) != n or len(rec.level) != n:
        _fail("edge arrays differ in length")
    tick = np.asarray(rec.tick, np.uint64)
    if n:
        if int(np.max(rec.channel)) > 15 or int(np.min(rec.channel)) < 0:
            _fail("edge channel outside 0-15")
        if int(np.max(rec.level)) > 1 or int(np.min(rec.level)) < 0:
            _fail("edge level not 0 or 1")
        if counter_bits < 64 and int(tick.max()) >> counter_bits:
            _fail(f"edge tick does not fit the {counter_bits}-bit counter")
    return tick


def _check_single(channel: int, level: int, tick: int, counter_bits: int) -> None:
    if not 0 <= channel <= 15:
        _fail(f"channel {channel} outside 0-15")
    if level not in (0, 1):
        _fail(f"level {level} not 0 or 1")
    if not 0 <= tick < 2**counter_bits:
        _fail(f"tick {tick} does not fit the {counter_bits}-bit counter")


def _check_beat(rec: Beat, counter_bits: int) -> None:
    if not 0 <= rec.tick < 2**counter_bits:
        _fail(f"beat tick {rec.tick} does not fit the {counter_bits}-bit counter")
    if not (0 <= rec.captured < 2**32 and 0 <= rec.dropped < 2**32):
        _fail("beat counts must be 0 to 2**32-1")
    if rec.short is None:
        if rec.cycles:
            _fail("a version 1 beat carries no cycle counts")
        return
    if not 0 <= rec.short < 2**32:
        _fail("beat short-pulse count must be 0 to 2**32-1")
    chans = [c for c, _ in rec.cycles]
    if chans != sorted(set(chans)) or any(not 0 <= c <= 15 for c in chans):
        _fail("beat cycle counts must be for distinct channels 0-15 in ascending order")
    if any(not 0 <= n < 2**32 for _, n in rec.cycles):
        _fail("beat cycle counts must be 0 to 2**32-1")


def _check_cycle(cycle: int) -> None:
    if not 0 <= cycle < 2**32:
        _fail(f"drive cycle {cycle} is not 0 to 2**32-1")


def _check_plan_accepted(rec: PlanAccepted) -> None:
    if not 0 <= rec.channel <= 15:
        _fail(f"channel {rec.channel} outside 0-15")
    if not (0 < rec.on_us < 2**32 and 0 < rec.off_us < 2**32 and 0 <= rec.cycles < 2**32):
        _fail("accepted plan times must be 1 to 2**32-1 us and its cycles 0 to 2**32-1")


def _go_mask(rec: GoAccepted, counter_bits: int) -> int:
    if any(not 0 <= c <= 15 for c in rec.channels):
        _fail("GO accepted channels must be 0-15")
    if not 0 <= rec.tick < 2**counter_bits:
        _fail(f"tick {rec.tick} does not fit the {counter_bits}-bit counter")
    mask = 0
    for c in rec.channels:
        mask |= 1 << c
    return mask


# two lowercase hex digits per byte value, first digit in the low byte (little-endian uint16)
_HEX_PAIRS = np.array([ord(f"{b:02x}"[0]) | ord(f"{b:02x}"[1]) << 8 for b in range(256)], "<u2")


def _hex_columns(values: np.ndarray, width: int) -> np.ndarray:
    """(n, width) array of lowercase hex digit bytes of uint64 `values`, most significant first.

    Works a byte at a time: the big-endian bytes of each value index a table of digit pairs.
    """
    nbytes = (width + 1) // 2
    big_endian = values.astype(">u8").view(np.uint8).reshape(-1, 8)[:, 8 - nbytes :]
    chars = _HEX_PAIRS[big_endian].view(np.uint8).reshape(-1, 2 * nbytes)
    return chars[:, 2 * nbytes - width :]


def _xor(data: bytes) -> int:
    x = 0
    for b in data:
        x ^= b
    return x


def _hex_width(max_value: int) -> int:
    return max(1, (max_value.bit_length() + 3) // 4)


class LineEncoder:
    """Records to line-form bytes, every line with its check: `*hh` (version 1) or `*LLCCCC` (version 2:
    length and CRC-16), as the last `Announce` encoded (or `version`) says.

    Ticks are written with a fixed number of hex digits: `tick_digits`, which an `Announce` sets from
    its counter width (8 digits for 32 bits), widened for a tick that does not fit.
    """

    def __init__(self, tick_digits: int = 8, counter_bits: int = 64, version: int = 1) -> None:
        self.tick_digits = tick_digits
        self.counter_bits = counter_bits
        self.version = version

    def _line(self, text: str) -> bytes:
        body = text.encode("ascii")
        if self.version >= 2:
            if len(body) > 255:
                _fail("a version 2 line body is at most 255 bytes")
            return b"%s*%02x%04x\n" % (body, len(body), crc16(body))
        return b"%s*%02x\n" % (body, _xor(body))

    def _tick(self, tick: int) -> str:
        return format(tick, f"0{self.tick_digits}x")

    def encode(
        self, record: Announce | Edges | Drive | Beat | Notice | Pong | PlanAccepted | GoAccepted
    ) -> bytes:
        match record:
            case Edges():
                return self._edges(record)
            case Drive(channel, level, tick, cycle):
                _check_single(channel, level, tick, self.counter_bits)
                text = f"D {channel:x} {level} {self._tick(tick)}"
                if cycle is not None:
                    _check_cycle(cycle)
                    text += f" {cycle}"
                return self._line(text)
            case Beat(tick, captured, dropped, short, cycles):
                _check_beat(record, self.counter_bits)
                text = f"B {self._tick(tick)} {captured} {dropped}"
                if short is not None:
                    text += f" {short}" + "".join(f" {c:x}:{n:x}" for c, n in cycles)
                return self._line(text)
            case PlanAccepted(channel, on_us, off_us, cycles):
                _check_plan_accepted(record)
                return self._line(f"K {channel} {on_us} {off_us} {cycles}")
            case GoAccepted(_, tick):
                mask = _go_mask(record, self.counter_bits)
                return self._line(f"G {mask:x} {self._tick(tick)}")
            case Announce(version, clock_hz, counter_bits, channels, board_id):
                _check_announce(record)
                self.counter_bits = counter_bits
                self.tick_digits = (counter_bits + 3) // 4
                self.version = version
                return self._line(f"A {version} {clock_hz} {counter_bits} {channels} {board_id}")
            case Notice(text):
                if len(text) > MAX_NOTICE or not (text.isascii() and text.isprintable()):
                    _fail("a line-form notice is at most 120 printable ASCII characters")
                return self._line(f"N {text}")
            case Pong(token):
                if not 0 <= token <= 0xFFFF:
                    _fail(f"pong token {token} outside 0-65535")
                return self._line(f"P {token}")
        _fail(f"{type(record).__name__} is not a record a sampler sends")
        raise AssertionError  # unreachable

    def encode_all(self, records: list) -> bytes:
        return b"".join(self.encode(r) for r in records)

    def _edges(self, rec: Edges) -> bytes:
        tick = _check_edges(rec, self.counter_bits)
        n = len(tick)
        if n == 0:
            return b""
        width = max(self.tick_digits, _hex_width(int(tick.max())))
        if self.version >= 2:
            return self._edges_v2(rec, tick, width)
        out = np.empty((n, 10 + width), np.uint8)
        out[:, 0] = ord("E")
        out[:, 1] = out[:, 3] = out[:, 5] = ord(" ")
        out[:, 2] = HEX_DIGITS[np.asarray(rec.channel, np.intp)]
        out[:, 4] = np.asarray(rec.level, np.uint8) + ord("0")
        out[:, 6 : 6 + width] = _hex_columns(tick, width)
        check = np.bitwise_xor.reduce(out[:, : 6 + width], axis=1)
        out[:, 6 + width] = ord("*")
        out[:, 7 + width] = HEX_DIGITS[check >> 4]
        out[:, 8 + width] = HEX_DIGITS[check & 0xF]
        out[:, 9 + width] = ord("\n")
        return out.tobytes()

    def _edges_v2(self, rec: Edges, tick: np.ndarray, width: int) -> bytes:
        n = len(tick)
        body = 6 + width
        out = np.empty((n, body + 8), np.uint8)
        out[:, 0] = ord("E")
        out[:, 1] = out[:, 3] = out[:, 5] = ord(" ")
        out[:, 2] = HEX_DIGITS[np.asarray(rec.channel, np.intp)]
        out[:, 4] = np.asarray(rec.level, np.uint8) + ord("0")
        out[:, 6:body] = _hex_columns(tick, width)
        crc = np.full(n, 0xFFFF, np.uint16)
        for k in range(body):
            crc = (crc << np.uint16(8)) ^ CRC16_TABLE[(crc >> np.uint16(8)) ^ out[:, k]]
        out[:, body] = ord("*")
        out[:, body + 1] = HEX_DIGITS[body >> 4]
        out[:, body + 2] = HEX_DIGITS[body & 0xF]
        for k in range(4):
            out[:, body + 3 + k] = HEX_DIGITS[(crc >> np.uint16(12 - 4 * k)) & np.uint16(0xF)]
        out[:, body + 7] = ord("\n")
        return out.tobytes()


class PackedEncoder:
    """Records to packed-form frames (COBS, 0x00-delimited), keeping the frame sequence number.

    An `Edges` batch is split into frames of at most `max_edges` edges, and wherever the gap between
    two edges exceeds 65535 ticks (deltas are taken modulo the counter width an `Announce` set).
    """

    def __init__(self, max_edges: int = 32, counter_bits: int = 64, sequence: int = 0) -> None:
        if not 1 <= max_edges <= MAX_EDGES_PER_FRAME:
            raise ProtocolError(f"max_edges must be 1-255, not {max_edges}")
        self.max_edges = max_edges
        self.counter_bits = counter_bits
        self.sequence = sequence & 0xFFFF

    def _frame(self, type_code: int, payload: bytes) -> bytes:
        raw = bytes((type_code, self.sequence & 0xFF, self.sequence >> 8)) + payload
        self.sequence = (self.sequence + 1) & 0xFFFF
        return cobs_encode(raw + crc32(raw).to_bytes(4, "little")) + b"\0"

    def encode(
        self, record: Announce | Edges | Drive | Beat | Notice | Pong | PlanAccepted | GoAccepted
    ) -> bytes:
        match record:
            case Edges():
                return self._edges(record)
            case Drive(channel, level, tick, cycle):
                _check_single(channel, level, tick, self.counter_bits)
                if cycle is None:
                    return self._frame(TYPE_DRIVE, _DRIVE.pack(channel, level, tick))
                _check_cycle(cycle)
                return self._frame(TYPE_DRIVE, _DRIVE_V2.pack(channel, level, tick, cycle))
            case Beat(tick, captured, dropped, short, cycles):
                _check_beat(record, self.counter_bits)
                if short is None:
                    return self._frame(TYPE_BEAT, _BEAT.pack(tick, captured, dropped))
                head = _BEAT_V2.pack(tick, captured, dropped, short, len(cycles))
                return self._frame(TYPE_BEAT, head + b"".join(_CYCLES.pack(c, k) for c, k in cycles))
            case PlanAccepted(channel, on_us, off_us, cycles):
                _check_plan_accepted(record)
                return self._frame(TYPE_PLAN_ACCEPTED, _PLAN_ACCEPTED.pack(channel, on_us, off_us, cycles))
            case GoAccepted(_, tick):
                mask = _go_mask(record, self.counter_bits)
                return self._frame(TYPE_GO_ACCEPTED, _GO_ACCEPTED.pack(mask, tick))
            case Announce(version, clock_hz, counter_bits, channels, board_id):
                _check_announce(record)
                self.counter_bits = counter_bits
                head = _ANNOUNCE.pack(version, clock_hz, counter_bits, channels)
                return self._frame(TYPE_ANNOUNCE, head + board_id.encode("ascii"))
            case Notice(text):
                body = text.encode("utf-8")
                if len(body) > MAX_NOTICE:
                    _fail("a packed notice is at most 120 bytes of UTF-8")
                return self._frame(TYPE_NOTICE, body)
            case Pong(token):
                if not 0 <= token <= 0xFFFF:
                    _fail(f"pong token {token} outside 0-65535")
                return self._frame(TYPE_PONG, _PONG.pack(token))
        _fail(f"{type(record).__name__} is not a record a sampler sends")
        raise AssertionError  # unreachable

    def encode_all(self, records: list) -> bytes:
        return b"".join(self.encode(r) for r in records)

    def frame_starts(self, rec: Edges) -> np.ndarray:
        """Indices of the edges of `rec` that begin a new frame (the split the encoder uses)."""
        tick = np.asarray(rec.tick, np.uint64)
        n = len(tick)
        mask = np.uint64((1 << self.counter_bits) - 1) if self.counter_bits < 64 else None
        delta = tick[1:] - tick[:-1]
        if mask is not None:
            delta &= mask
        new_run = np.empty(n, bool)
        new_run[:1] = True
        new_run[1:] = delta > MAX_DELTA
        index = np.arange(n)
        run_start = np.maximum.accumulate(np.where(new_run, index, 0))
        new_frame = new_run | ((index - run_start) % self.max_edges == 0)
        return np.flatnonzero(new_frame)

    def _edges(self, rec: Edges) -> bytes:
        tick = _check_edges(rec, self.counter_bits)
        n = len(tick)
        if n == 0:
            return b""
        delta = np.zeros(n, np.uint64)
        delta[1:] = tick[1:] - tick[:-1]
        if self.counter_bits < 64:
            delta &= np.uint64((1 << self.counter_bits) - 1)
        starts = self.frame_starts(rec)
        delta[starts] = 0
        entries = np.empty((n, 3), np.uint8)
        entries[:, 0] = np.asarray(rec.channel, np.uint8) | (np.asarray(rec.level, np.uint8) << 7)
        entries[:, 1] = delta & np.uint64(0xFF)
        entries[:, 2] = delta >> np.uint64(8)
        body = entries.tobytes()
        ends = np.empty_like(starts)
        ends[:-1] = starts[1:]
        ends[-1] = n
        out = []
        seq = self.sequence
        head, enc = _EDGES_HEAD.pack, cobs_encode
        for s, e, base in zip(starts.tolist(), ends.tolist(), tick[starts].tolist(), strict=True):
            raw = head(TYPE_EDGES, seq, base, e - s) + body[3 * s : 3 * e]
            out.append(enc(raw + crc32(raw).to_bytes(4, "little")))
            seq = (seq + 1) & 0xFFFF
        self.sequence = seq
        out.append(b"")
        return b"\0".join(out)
