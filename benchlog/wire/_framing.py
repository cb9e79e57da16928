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
