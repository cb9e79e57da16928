"""COBS framing and the frame CRC (docs/protocol.md, packed form). Thin wrappers over C code."""

from __future__ import annotations

import zlib

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
