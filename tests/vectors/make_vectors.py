"""Regenerate the golden vectors in this folder (run by hand, only when the protocol changes).

    python tests/vectors/make_vectors.py

Each `*.json` file holds the records of one short stream and the exact bytes of both forms, so that the
firmware (C) and benchlog (Python) are tested against the same bytes:

- `records`: the records in stream order (edges as [channel, level, tick] rows);
- `line_text` / `line_hex`: the line form, text and hex of the same bytes;
- `packed_hex`: the packed form, all frames with their 0x00 delimiters;
- `packed_frames`: each frame before COBS (`raw_hex`: type, sequence, payload, CRC) and after
  (`cobs_hex`, without the delimiter), for a port that wants to check one step at a time;
- `max_edges`: the frame size the packed encoder used; sequence numbers start at `first_sequence`.

`decode_*.json` files are decode-only: `input_hex` (damaged or mixed bytes) and the `records` a host
must get from it, with the fault counts it must report.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "wire"))

from _wire_helpers import record_to_json  # noqa: E402

from benchlog.wire import (  # noqa: E402
    Announce,
    Beat,
    Decoder,
    Drive,
    Edges,
    GoAccepted,
    LineEncoder,
    Notice,
    PackedEncoder,
    PlanAccepted,
    Pong,
    cobs_decode,
)

STREAMS = {
    "basic_32bit": (
        "Every record type on a 32-bit counter at 1 MHz.",
        32,
        [
            Announce(1, 1_000_000, 32, 8, "AVR8-REF-01"),
            Beat(0x00000010, 0, 0),
            Drive(3, 1, 0x0003C350),
            Edges.of([(3, 1, 0x0003D090), (3, 0, 0x0003D1F4), (3, 1, 0x0003D2A8)]),
            Drive(3, 0, 0x0007A120),
            Edges.of([(3, 0, 0x0007B0C0), (3, 1, 0x0007B17E), (3, 0, 0x0007B3D0)]),
            Beat(0x000F4240, 6, 0),
            Notice("coil supply low"),
            Pong(42),
        ],
        32,
    ),
    "wrap_16bit": (
        "A 16-bit counter at 2 MHz crossing its wrap (deltas taken modulo 2**16), frames of at most 4 edges.",
        16,
        [
            Announce(1, 2_000_000, 16, 4, "PORT-16"),
            Edges.of([(0, 1, 0xFFF0), (0, 0, 0xFFFE), (1, 1, 0x0005), (0, 1, 0x0100), (1, 0, 0x0101)]),
            Beat(0x4000, 5, 0),
            Edges.of([(2, 1, 0x4001), (2, 0, 0x4001)]),
        ],
        4,
    ),
    "wide_64bit": (
        "A 64-bit counter crossing its wrap, a delta of exactly 65535 (same frame) and one over it "
        "(new frame).",
        64,
        [
            Announce(1, 48_000_000, 64, 16, "WIDE_64"),
            Edges.of(
                [
                    (15, 1, 0xFFFFFFFFFFFF0000),
                    (15, 0, 0xFFFFFFFFFFFFFFFF),
                    (0, 1, 0x0000000000000003),
                    (0, 0, 0x0000000000020000),
                ]
            ),
            Beat(0x00030000, 5, 1),
        ],
        32,
    ),
    "v2_32bit": (
        "Protocol version 2: plan and GO accepted, drives with their cycle, beats with the short-pulse "
        "count and per-channel cycles; every line with its length and CRC-16.",
        32,
        [
            Announce(2, 2_000_000, 32, 8, "blref-avr8"),
            Beat(0x00000010, 0, 0, 0, ()),
            PlanAccepted(3, 50_000, 50_000, 2),
            PlanAccepted(5, 20_000, 80_000, 0),
            GoAccepted((3, 5), 0x00030D40),
            Drive(3, 1, 0x00030D40, 1),
            Drive(5, 1, 0x00030D41, 1),
            Edges.of([(3, 1, 0x0003D090), (3, 0, 0x0003D1F4), (3, 1, 0x0003D2A8)]),
            Drive(5, 0, 0x0005B8D8, 1),
            Drive(3, 0, 0x0004A380, 1),
            Edges.of([(3, 0, 0x0004B0C0)]),
            Beat(0x000F4240, 4, 0, 3, ((3, 1), (5, 1))),
            Drive(3, 1, 0x00063A00, 2),
            Notice("coil supply low"),
            Pong(42),
            Beat(0xFFFFFFF0, 4294967295, 17, 4294967295, ((0, 0xFFFFFFFF), (3, 2), (7, 7))),
        ],
        32,
    ),
}


def stream_vector(description: str, bits: int, records: list, max_edges: int) -> dict:
    line = LineEncoder().encode_all(records)
    enc = PackedEncoder(max_edges=max_edges)
    packed = enc.encode_all(records)
    frames = [seg for seg in packed.split(b"\0")[:-1]]
    return {
        "description": description,
        "counter_bits": bits,
        "max_edges": max_edges,
        "first_sequence": 0,
        "records": [record_to_json(r) for r in records],
        "line_text": line.decode("ascii"),
        "line_hex": line.hex(),
        "packed_hex": packed.hex(),
        "packed_frames": [{"raw_hex": cobs_decode(f).hex(), "cobs_hex": f.hex()} for f in frames],
    }


def decode_vectors() -> dict[str, dict]:
    good = LineEncoder().encode_all([Announce(1, 1_000_000, 32, 8, "AVR8-REF-01"), Beat(0x10, 0, 0)])
    # version 2 damage: each kind of single-byte error the line check must always catch
    line_damaged = (
        b"\x00\x7f~noise\n"  # garbage before the first record
        + good
        + b"E 3 1 0003d090*00\n"  # wrong checksum
        + b"E 3 1 0003d091\n"  # no checksum after lines with one: a fault (a dropped '*' looks so)
        + b"E 3 2 0003d092*38\n"  # bad level
        + b"Z some future record*00\n"  # unknown record type (checksum wrong, so a fault)
        + b"Q 1 2 3*41\n"  # unknown record type: skipped and counted
        + b"e 3 1 0003D093\r\n"  # unknown ('e' is not 'E'); \r\n line end
        + b"E 2 0 0003D094\r\n"  # uppercase hex, \r\n
    )
    v2 = LineEncoder()
    intact = v2.encode_all(
        [Announce(2, 1_000_000, 32, 8, "AVR8-REF-02"), Beat(0x10, 0, 0, 0, ()), Drive(1, 1, 0x20, 1)]
    )
    damaged = [v2.encode(Edges.of([(1, 1, 0x30 + i)])) for i in range(6)]
    damaged[0] = damaged[0][:4] + damaged[0][5:]  # a byte dropped
    damaged[1] = damaged[1][:7] + bytes([damaged[1][7] ^ 0x01]) + damaged[1][8:]  # a byte flipped
    damaged[2] = damaged[2][:6] + b"0" + damaged[2][6:]  # a byte inserted
    damaged[3] = damaged[3].split(b"*")[0] + b"\n"  # the check dropped
    damaged[4] = damaged[4][:-1] + b"n"  # a newline flipped: this line runs into the next
    line_v2_damaged = (
        intact
        + b"".join(damaged)
        + b"E 1 0 00000040*0e\n"  # a version 1 check in a version 2 stream: a fault
        + v2.encode_all([Drive(1, 0, 0x50, 1), Beat(0x60, 7, 0, 0, ((1, 1),))])
    )
    enc = PackedEncoder()
    frames = [
        enc.encode(Announce(1, 1_000_000, 32, 8, "AVR8-REF-01")),
        enc.encode(Edges.of([(1, 1, 100), (1, 0, 150)])),
        enc.encode(Edges.of([(1, 1, 300)])),  # will have a byte flipped
        enc.encode(Edges.of([(1, 0, 400)])),  # will be dropped: a sequence gap of 2 frames
        enc.encode(Beat(1000, 5, 0)),
    ]
    flipped = bytearray(frames[2])
    flipped[5] ^= 0x40
    packed_damaged = b"\x13\x37" + b"\0" + frames[0] + frames[1] + bytes(flipped) + frames[4]
    out = {}
    for name, data, note in (
        (
            "decode_line_damaged",
            line_damaged,
            "Line form with garbage, bad and missing checksums, unknown records.",
        ),
        (
            "decode_line_v2_damaged",
            line_v2_damaged,
            "Version 2 line form: a dropped byte, a flipped byte, an inserted byte, a missing and a "
            "version 1 check, two lines run together; only the intact lines decode.",
        ),
        (
            "decode_packed_damaged",
            packed_damaged,
            "Packed form: leading garbage, a flipped byte, a lost frame.",
        ),
    ):
        dec = Decoder()
        records = dec.feed(data)
        c = dec.counters
        out[name] = {
            "description": note,
            "input_hex": data.hex(),
            "records": [
                record_to_json(r) for r in records if type(r).__name__ not in ("Fault", "SequenceGap")
            ],
            "sequence_gaps": [
                [r.expected, r.received, r.frames_lost] for r in records if type(r).__name__ == "SequenceGap"
            ],
            "faults": c.faults,
            "fault_bytes": c.fault_bytes,
            "unknown": c.unknown,
        }
    return out


def main() -> None:
    for name, args in STREAMS.items():
        (HERE / f"{name}.json").write_text(json.dumps(stream_vector(*args), indent=1) + "\n")
    for name, vec in decode_vectors().items():
        (HERE / f"{name}.json").write_text(json.dumps(vec, indent=1) + "\n")


if __name__ == "__main__":
    main()
