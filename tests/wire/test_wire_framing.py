"""CRC-32 and COBS against published check values and reference libraries."""

from __future__ import annotations

import binascii
import zlib

import pytest
from hypothesis import given
from hypothesis import strategies as st

from benchlog.wire import DecodeError, cobs_decode, cobs_encode, crc32


def test_crc32_catalogue_check_value():
    # Catalogue of parametrised CRC algorithms (Greg Cook), CRC-32/ISO-HDLC: check = 0xCBF43926
    assert crc32(b"123456789") == 0xCBF43926


@given(st.binary(max_size=2000))
def test_crc32_matches_reference_libraries(data):
    # reference libraries: zlib.crc32 and binascii.crc32 compute CRC-32/ISO-HDLC
    assert crc32(data) == zlib.crc32(data) == binascii.crc32(data)


def _run(start: int, stop: int) -> bytes:
    return bytes(range(start, stop))


# Encoding examples of the COBS article on Wikipedia ("Consistent Overhead Byte Stuffing", examples
# table; values from memory), which follow Cheshire and Baker, IEEE/ACM Trans. Networking 7(2), 1999.
# Shown without the trailing 0x00 delimiter.
COBS_EXAMPLES = [
    (b"\x00", b"\x01\x01"),
    (b"\x00\x00", b"\x01\x01\x01"),
    (b"\x00\x11\x00", b"\x01\x02\x11\x01"),
    (b"\x11\x22\x00\x33", b"\x03\x11\x22\x02\x33"),
    (b"\x11\x22\x33\x44", b"\x05\x11\x22\x33\x44"),
    (b"\x11\x00\x00\x00", b"\x02\x11\x01\x01\x01"),
    (_run(1, 255), b"\xff" + _run(1, 255)),  # 254 non-zero bytes: one full block
    (_run(0, 255), b"\x01\xff" + _run(1, 255)),
    (_run(1, 256), b"\xff" + _run(1, 255) + b"\x02\xff"),
    (_run(2, 256) + b"\x00", b"\xff" + _run(2, 256) + b"\x01\x01"),
    (_run(3, 256) + b"\x00\x01", b"\xfe" + _run(3, 256) + b"\x02\x01"),
]


@pytest.mark.parametrize(("plain", "encoded"), COBS_EXAMPLES)
def test_cobs_published_examples(plain, encoded):
    assert cobs_encode(plain) == encoded
    assert cobs_decode(encoded) == plain


def test_cobs_paper_rule_for_long_runs():
    # Cheshire and Baker (1999), section 3: a code byte 0xFF is followed by 254 data bytes and no
    # implied zero, so overhead is at most one byte in 254, rounded up.
    for n in (0, 1, 253, 254, 255, 508, 1024):
        enc = cobs_encode(b"\x55" * n)
        assert b"\x00" not in enc
        assert len(enc) <= n + max(1, -(-n // 254))


@given(st.binary(max_size=1200))
def test_cobs_round_trip_and_no_zero(data):
    enc = cobs_encode(data)
    assert b"\x00" not in enc
    assert cobs_decode(enc) == data


def test_cobs_rejects_a_code_pointing_past_the_end():
    with pytest.raises(DecodeError):
        cobs_decode(b"\x05\x11\x22")
