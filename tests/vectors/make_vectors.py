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
    LineEncoder,
    Notice,
    PackedEncoder,
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
    line_damaged = (
        b"\x00\x7f~noise\n"  # garbage before the first record
        + good
        + b"E 3 1 0003d090*00\n"  # wrong checksum
        + b"E 3 1 0003d091\n"  # no checksum: allowed
        + b"E 3 2 0003d092*38\n"  # bad level
        + b"Z some future record*00\n"  # unknown record type (checksum wrong, so a fault)
        + b"Q 1 2 3\n"  # unknown record type, no checksum: skipped and counted
        + b"e 3 1 0003D093\r\n"  # unknown ('e' is not 'E'); \r\n line end
        + b"E 2 0 0003D094\r\n"  # uppercase hex, \r\n
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
        ("decode_line_damaged", line_damaged, "Line form with garbage, bad checksums, unknown records."),
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
