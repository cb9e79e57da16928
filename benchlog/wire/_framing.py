"""COBS framing and the frame CRC (docs/protocol.md, packed form), and the CRC-16 of a version 2 line."""

from __future__ import annotations

import binascii
import zlib

import numpy as np
from cobs import cobs as _cobs

DecodeError = _cobs.DecodeError


def cobs_encode(data: bytes) -> bytes:
    """COBS-encode `data` (Cheshire and Baker's algorithm); the result contains no 0x00 byte."""
    return _cobs.encode(data)


def cobs_decode(data: bytes) -> bytes:
    """Undo `cobs_encode` (without the 0x00 delimiter); raises `DecodeError` on invalid input."""
    return _cobs.decode(data)


def crc32(data: bytes) -> int:
    """CRC-32/ISO-HDLC of `data`, as zlib computes it (check value 0xCBF43926)."""
    return zlib.crc32(data)


def crc16(data: bytes) -> int:
    """CRC-16/IBM-3740 of `data` (polynomial 0x1021, init 0xFFFF, not reflected, no final XOR; check
    value 0x29B1 for ASCII `123456789`): the check of a version 2 line. binascii computes it in C."""
    return binascii.crc_hqx(data, 0xFFFF)


def _crc16_table() -> np.ndarray:
    table = np.zeros(256, np.uint16)
    for i in range(256):
        crc = i << 8
        for _ in range(8):
            crc = ((crc << 1) ^ 0x1021) if crc & 0x8000 else crc << 1
        table[i] = crc & 0xFFFF
    return table


CRC16_TABLE = _crc16_table()


def crc16_spans(a: np.ndarray, starts: np.ndarray, lengths: np.ndarray) -> np.ndarray:
    """CRC-16/IBM-3740 of every span `a[starts[i] : starts[i] + lengths[i]]`, all at once.

    One numpy step per byte column (lines are a few tens of bytes), not a Python loop per line."""
    crc = np.full(len(starts), 0xFFFF, np.uint16)
    if not len(starts):
        return crc
    table = CRC16_TABLE
    longest = int(lengths.max())
    for k in range(longest):
        live = lengths > k
        byte = a[np.where(live, starts + k, 0)].astype(np.uint16)
        step = (crc << np.uint16(8)) ^ table[((crc >> np.uint16(8)) ^ byte) & np.uint16(0xFF)]
        crc = np.where(live, step, crc)
    return crc


def cobs_decode_spans(a: np.ndarray, starts: np.ndarray, ends: np.ndarray) -> tuple[np.ndarray, ...]:
    """COBS-decode every span `a[starts[i]:ends[i]]` (non-empty, no 0x00 inside) at once.

    The code bytes of a span form a chain (each one says how far the next one is); the chain is followed
    for all spans together, one numpy step per link, so the loop runs as many times as the longest chain,
    not once per byte or frame. Returns (ok, decoded, dstarts, dlens): `ok` where `cobs_decode` would
    succeed, the decoded bytes of all spans in span order, and where each span's bytes start and how many.
    Between two spans' bytes there is nothing or one byte 0x00 (intact spans tiling `a`, decoded joined).
    """
    n = len(a)
    if len(starts) and starts[0] == 0 and ends[-1] == n - 1 and (starts[1:] == ends[:-1] + 1).all():
        got = _decode_joined(a, starts, ends)
        if got is not None:
            return got
    ok = np.zeros(len(starts), bool)
    p = starts.astype(np.int64)
    end = ends.astype(np.int64)
    idx = np.arange(len(starts))
    codes = []  # code byte positions, link by link
    silent = []  # code bytes after a 0xFF block: no zero stands in their place
    silent_span = []  # the span each of those is in
    # A 0xFF code is followed by another code only in a span longer than 255 bytes; without such spans
    # (a frame of under 254 bytes, the usual case) the loop needs not look for them.
    long_spans = len(starts) > 0 and int((end - p).max()) > 255
    prev_full = None
    while len(p):
        codes.append(p)
        code = a[p]
        if prev_full is not None and prev_full.any():
            silent.append(p[prev_full])
            silent_span.append(idx[prev_full])
        nxt = p + code
        live = nxt < end
        if live.all():
            p = nxt
        else:
            # index arrays taken from each column (quicker than the masks on each)
            done = np.flatnonzero(~live)
            ok[idx.take(done)] = nxt.take(done) == end.take(done)
            keep = np.flatnonzero(live)
            p, end, idx = nxt.take(keep), end.take(keep), idx.take(keep)
            if long_spans:
                code = code.take(keep)
        if long_spans:
            prev_full = code == 0xFF
    values = a.copy()
    keep = np.ones(n, bool)
    if codes:
        values[np.concatenate(codes)] = 0
    keep[starts] = False
    keep[ends[ends < n]] = False
    if silent:
        keep[np.concatenate(silent)] = False
    covered = len(starts) and starts[0] == 0 and ends[-1] >= n - 1 and (starts[1:] == ends[:-1] + 1).all()
    if not covered:  # bytes between the spans (empty or skipped ones) are no span's
        inside = np.zeros(n + 1, np.int8)
        np.add.at(inside, starts, 1)
        np.add.at(inside, ends, -1)
        keep &= np.cumsum(inside, dtype=np.int8)[:n] > 0
    if covered:
        # a span keeps all its bytes but its first code byte and its silent ones (each inside it)
        lens = (ends - starts).astype(np.int64) - 1
        if silent_span:
            lens -= np.bincount(np.concatenate(silent_span), minlength=len(starts))
        return ok, values[keep], np.cumsum(lens) - lens, lens  # (a mask with long runs: quicker than take)
    kept = np.flatnonzero(keep)
    first = np.searchsorted(kept, starts)
    return ok, values[kept], first, np.searchsorted(kept, ends) - first


def _decode_joined(a: np.ndarray, starts: np.ndarray, ends: np.ndarray) -> tuple[np.ndarray, ...] | None:
    """`cobs_decode_spans` for spans that tile `a` with one 0x00 after each, when every span is intact:
    one call of the C decoder over the spans joined (their delimiters dropped), or None.

    Joined, the encoded frames decode as one: where one frame's last block ends, the decoder writes a zero
    for the code byte it reads next, the next frame's first. Output byte q - 1 stands for input byte q
    (while no 0xFF code drops its zero: then the output is exactly one byte shorter than the input), and
    is zero exactly where a code byte was (a span holds no 0x00). So every span is intact when the output
    has that length and a zero in front of every span but the first: each span's chain of codes then
    runs from its first byte exactly to its end, and the last one's too, or the decoder raises. Then each
    span's bytes are the output's between those zeros (left in place: one 0x00 between two spans' bytes).
    Anything else (a damaged frame anywhere in the
    read, a span of 255 bytes or more) returns None: the chains are followed span by span instead."""
    whole = a.base if type(a.base) is bytes and len(a.base) == len(a) else a.tobytes()  # (no copy of a read)
    joined = whole.replace(b"\0", b"")
    try:
        out = np.frombuffer(_cobs.decode(joined), np.uint8)
    except DecodeError:
        return None
    lens = (ends - starts).astype(np.int64)
    if len(out) != len(joined) - 1:
        return None
    zeros_at = np.cumsum(lens[:-1]) - 1  # the zero written for each span's first code byte but the first
    if len(zeros_at) and (out.take(zeros_at) != 0).any():
        return None
    # span i's bytes start where its first code byte stood in the joined input, less the first
    return np.ones(len(starts), bool), out, np.cumsum(lens) - lens, lens - 1


_CRC_OF_ZEROS: list[int] = []


def crc32_all_valid(frames: np.ndarray, lengths: np.ndarray, starts: np.ndarray | None = None) -> bool:
    """Whether every frame (in order in `frames`, back to back or at `starts`, each ending in the CRC-32
    of the rest, little-endian) is intact, with two zlib calls instead of one per frame. Bytes of `frames`
    between frames must be 0x00: they are then the same in both runs compared.

    A CRC is linear: over frames that each end in their own CRC, the CRC of the whole run depends only
    on the frames' lengths, so it equals that of frames of zeros with the same lengths. A damaged frame
    changes it exactly when it changes that frame's own CRC check (multiplying by a power of x modulo the
    polynomial is invertible), so one damaged frame is always caught as it would be alone; damage in two
    or more frames cancels with the chance of one CRC collision (2**-32).
    """
    if not len(lengths):
        return True
    longest = int(lengths.max())
    if len(_CRC_OF_ZEROS) < longest - 3:  # the CRC of k zeros, for every k up to the longest frame's
        _CRC_OF_ZEROS.extend(zlib.crc32(bytes(k)) for k in range(len(_CRC_OF_ZEROS), longest - 3))
    ref = np.zeros(len(frames), np.uint8)
    crcs = np.asarray(_CRC_OF_ZEROS, np.uint32)[lengths - 4].astype("<u4").view(np.uint8)
    tails = (np.cumsum(lengths) if starts is None else starts + lengths) - 4
    ref[(tails[:, None] + np.arange(4)).reshape(-1)] = crcs  # each frame's last four bytes, in order
    return zlib.crc32(frames) == zlib.crc32(ref)
