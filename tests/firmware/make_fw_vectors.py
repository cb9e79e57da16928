"""Regenerate tests/vectors/firmware_*.json from the host port (run by hand, after a deliberate change
to the firmware's output):

    make -C firmware_ref host
    python tests/firmware/make_fw_vectors.py firmware_ref/build/host/blhost

Each file holds a script of pin changes and commands, the host-port options, the exact bytes the core
sent in each form, and the edges the script describes (computed here from the script, not from the
output), so the C side (bytes) and the Python side (decoding) are held to the same session. The core
speaks version 2: its packed stream starts with a 0x00 before the first frame (`packed_preamble_hex`).
"""

from __future__ import annotations

import json
import subprocess
import sys
import tempfile
from pathlib import Path

from benchlog.wire import cobs_decode

HERE = Path(__file__).resolve().parent
OUT = HERE.parent / "vectors"

SCRIPT = """\
# two channels of a 16-bit counter at 2 MHz: a make with bounce, a break, a wrap, a ping, and a plan of
# two cycles on channel 1 (acknowledged, its drives numbered, its count in the beats)
1000 edge 0 1
1180 edge 0 0
1300 edge 0 1
1300 edge 1 1
20000 cmd PING 7
30000 cmd PLAN 1 5000 4000 2
30000 cmd GO
40000 edge 1 0
70000 edge 0 0
70090 edge 0 1
70200 edge 0 0
140000 end
"""


def script_edges(script: str, bits: int) -> list[list[int]]:
    rows = []
    for line in script.splitlines():
        parts = line.split("#")[0].split()
        if len(parts) == 4 and parts[1] == "edge":
            rows.append([int(parts[2]), int(parts[3]), int(parts[0]) % 2**bits])
    return rows


def frame_record(raw: bytes, bits: int) -> dict:
    """One decoded packed frame as a record in the shared vectors' JSON shape (tests/vectors)."""
    kind, body = raw[0], raw[3:-4]
    u = int.from_bytes
    if kind == 0x10:
        return {
            "type": "announce",
            "version": body[0],
            "clock_hz": u(body[1:5], "little"),
            "counter_bits": body[5],
            "channels": body[6],
            "board_id": body[7:].decode("ascii"),
        }
    if kind == 0x03:
        beat = {
            "type": "beat",
            "tick": u(body[0:8], "little"),
            "captured": u(body[8:12], "little"),
            "dropped": u(body[12:16], "little"),
        }
        if len(body) > 16:  # version 2
            beat["short"] = u(body[16:20], "little")
            beat["cycles"] = [
                [body[21 + 5 * i], u(body[22 + 5 * i : 26 + 5 * i], "little")] for i in range(body[20])
            ]
        return beat
    if kind == 0x02:
        drive = {"type": "drive", "channel": body[0], "level": body[1], "tick": u(body[2:10], "little")}
        if len(body) > 10:  # version 2
            drive["cycle"] = u(body[10:14], "little")
        return drive
    if kind == 0x06:
        return {
            "type": "plan_accepted",
            "channel": body[0],
            "on_us": u(body[1:5], "little"),
            "off_us": u(body[5:9], "little"),
            "cycles": u(body[9:13], "little"),
        }
    if kind == 0x07:
        mask = u(body[0:2], "little")
        return {
            "type": "go_accepted",
            "channels": [c for c in range(16) if mask >> c & 1],
            "tick": u(body[2:10], "little"),
        }
    if kind == 0x05:
        return {"type": "pong", "token": u(body[0:2], "little")}
    if kind == 0x04:
        return {"type": "notice", "text": body.decode("utf-8")}
    assert kind == 0x01
    tick, edges = u(body[0:8], "little"), []
    for i in range(body[8]):
        entry = body[9 + 3 * i : 12 + 3 * i]
        tick = (tick + u(entry[1:3], "little")) % 2**bits
        edges.append([entry[0] & 0x0F, entry[0] >> 7, tick])
    return {"type": "edges", "edges": edges}


def main(blhost: str) -> None:
    options = ["--bits", "16", "--clock-hz", "2000000", "--channels", "2", "--board", "VEC-16"]
    vector = {
        "description": "A host-port session on a 16-bit counter (protocol version 2): bounce, simultaneous "
        "edges, a wrap, a ping, a plan of two cycles.",
        "script": SCRIPT,
        "options": options,
        "edges": script_edges(SCRIPT, 16),
    }
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "script.txt"
        path.write_text(SCRIPT)
        for form, key in (("L", "line_hex"), ("P", "packed_hex")):
            out = subprocess.run(
                [blhost, "run", "--form", form, *options, str(path)], capture_output=True, check=True
            )
            vector[key] = out.stdout.hex()
    # the shared stream-vector fields too, so the Python encoders are held to the C bytes
    packed = bytes.fromhex(vector["packed_hex"])
    assert packed[:1] == b"\0", "a version 2 sampler starts its packed stream with a 0x00"
    line = bytes.fromhex(vector["line_hex"])
    assert line[:2] == b"\r\n", "a version 2 sampler starts its line stream with an empty line"
    frames = packed[1:].split(b"\0")[:-1]
    raws = [cobs_decode(f) for f in frames]
    vector.update(
        counter_bits=16,
        max_edges=32,
        first_sequence=0,
        packed_preamble_hex="00",
        line_preamble_hex="0d0a",
        records=[frame_record(r, 16) for r in raws],
        line_text=line[2:].decode("ascii"),
        packed_frames=[{"raw_hex": r.hex(), "cobs_hex": f.hex()} for r, f in zip(raws, frames, strict=True)],
    )
    (OUT / "firmware_host_session.json").write_text(json.dumps(vector, indent=1) + "\n")


if __name__ == "__main__":
    main(sys.argv[1])
