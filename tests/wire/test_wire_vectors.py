"""The golden vectors in tests/vectors/ (shared with the firmware's C tests).

Besides re-encoding, every packed frame is checked on an independent path: a COBS decoder written here
straight from Cheshire and Baker's description (a code byte n > 0 is followed by n-1 data bytes, then an
implied zero unless n = 0xFF) and binascii.crc32 (reference library) for the CRC; every line's checksum
is recomputed with functools.reduce.
"""

from __future__ import annotations

import binascii
import functools
import json
import operator
from pathlib import Path

import pytest
from _wire_helpers import flatten, record_from_json

from benchlog.wire import Decoder, LineEncoder, PackedEncoder

VECTORS = Path(__file__).resolve().parent.parent / "vectors"
STREAMS = sorted(p for p in VECTORS.glob("*.json") if not p.name.startswith("decode_"))
DECODES = sorted(VECTORS.glob("decode_*.json"))


def reference_cobs_decode(data: bytes) -> bytes:
    out = bytearray()
    i = 0
    while i < len(data):
        code = data[i]
        assert code != 0 and i + code <= len(data) + (0 if code == 1 else 0)
        out += data[i + 1 : i + code]
        i += code
        if code != 0xFF and i < len(data):
            out.append(0)
    return bytes(out)


def test_there_are_vectors():
    assert len(STREAMS) >= 3 and len(DECODES) >= 2


@pytest.mark.parametrize("path", STREAMS, ids=lambda p: p.stem)
def test_stream_vector(path):
    vec = json.loads(path.read_text())
    records = [record_from_json(r) for r in vec["records"]]
    line = bytes.fromhex(vec["line_hex"])
    packed = bytes.fromhex(vec["packed_hex"])
    preamble = bytes.fromhex(vec.get("packed_preamble_hex", ""))  # a fresh version 2 sampler's 0x00
    line_pre = bytes.fromhex(vec.get("line_preamble_hex", ""))  # and its empty line
    assert line == line_pre + vec["line_text"].encode("ascii")
    assert line_pre + LineEncoder().encode_all(records) == line
    assert (
        preamble
        + PackedEncoder(max_edges=vec["max_edges"], sequence=vec["first_sequence"]).encode_all(records)
        == packed
    )
    for data in (line, packed):
        dec = Decoder()
        assert flatten(dec.feed(data)) == flatten(records)
        assert dec.counters.faults == 0
    # independent checks of the bytes themselves
    for text in vec["line_text"].splitlines():
        body, check = text.rsplit("*", 1)
        if len(check) == 6:  # version 2: body length, then CRC-16/IBM-3740 (binascii.crc_hqx, init 0xFFFF)
            assert int(check[:2], 16) == len(body)
            assert int(check[2:], 16) == binascii.crc_hqx(body.encode(), 0xFFFF)
        else:
            assert int(check, 16) == functools.reduce(operator.xor, body.encode(), 0)
    joined = b"".join(bytes.fromhex(f["cobs_hex"]) + b"\0" for f in vec["packed_frames"])
    assert preamble + joined == packed
    for seq, f in enumerate(vec["packed_frames"], start=vec["first_sequence"]):
        raw = bytes.fromhex(f["raw_hex"])
        assert reference_cobs_decode(bytes.fromhex(f["cobs_hex"])) == raw
        assert binascii.crc32(raw[:-4]) == int.from_bytes(raw[-4:], "little")
        assert int.from_bytes(raw[1:3], "little") == seq & 0xFFFF


@pytest.mark.parametrize("path", DECODES, ids=lambda p: p.stem)
def test_decode_vector(path):
    vec = json.loads(path.read_text())
    data = bytes.fromhex(vec["input_hex"])
    expected = [record_from_json(r) for r in vec["records"]]
    for chunk in (len(data), 1, 7):
        dec = Decoder()
        out = []
        for i in range(0, len(data), chunk):
            out += dec.feed(data[i : i + chunk])
        assert flatten(out) == flatten(expected)
        gaps = [[r.expected, r.received, r.frames_lost] for r in out if type(r).__name__ == "SequenceGap"]
        assert gaps == vec["sequence_gaps"]
        assert dec.counters.faults == vec["faults"]
        assert dec.counters.fault_bytes == vec["fault_bytes"]
        assert dec.counters.unknown == vec["unknown"]
