"""The C encoders against the golden vectors in tests/vectors/ (the same bytes the Python tests use).

Each vector's records are fed to `blhost encode`, which calls the firmware's own encoders; the bytes
must equal the vector's, in both forms. The reference core carries counters of 16 to 32 bits, so a
wider vector must be refused with a clear message rather than encoded wrongly.
"""

from __future__ import annotations

import json
import subprocess
from pathlib import Path

import pytest
from _fw_helpers import decode_all, edge_rows, run_host

from tests.conftest import HANG_S

VECTORS = Path(__file__).resolve().parents[1] / "vectors"
SHARED = sorted(
    p
    for p in VECTORS.glob("*.json")
    if not p.stem.startswith("firmware_") and "packed_hex" in json.loads(p.read_text())
)


def encode_script(vector: dict, form: str) -> str:
    lines = [f"form {form}", f"seq {vector['first_sequence']}", f"bits {vector['counter_bits']}"]
    lines.append(f"maxedges {vector['max_edges']}")
    for r in vector["records"]:
        kind = r["type"]
        if kind == "announce":
            assert r["version"] in (1, 2)
            lines.append(f"version {r['version']}")
            lines.append(f"announce {r['clock_hz']} {r['counter_bits']} {r['channels']} {r['board_id']}")
        elif kind == "edges":
            lines.append("edges " + " ".join(f"{ch}:{lv}:{tick}" for ch, lv, tick in r["edges"]))
        elif kind == "drive":
            cycle = f" {r['cycle']}" if "cycle" in r else ""
            lines.append(f"drive {r['channel']} {r['level']} {r['tick']}{cycle}")
        elif kind == "beat":
            counts = ""
            if "short" in r:
                counts = f" {r['short']}" + "".join(f" {c}:{n}" for c, n in r["cycles"])
            lines.append(f"beat {r['tick']} {r['captured']} {r['dropped']}{counts}")
        elif kind == "plan_accepted":
            lines.append(f"planok {r['channel']} {r['on_us']} {r['off_us']} {r['cycles']}")
        elif kind == "go_accepted":
            lines.append(f"gook {sum(1 << c for c in r['channels'])} {r['tick']}")
        elif kind == "notice":
            lines.append(f"notice {r['text']}")
        elif kind == "pong":
            lines.append(f"pong {r['token']}")
        else:
            raise AssertionError(f"unknown record type in vector: {kind}")
    return "\n".join(lines) + "\n"


def encode(blhost: Path, text: str) -> subprocess.CompletedProcess:
    return subprocess.run([str(blhost), "encode"], input=text.encode(), capture_output=True, timeout=HANG_S)


def test_there_are_shared_vectors_to_check() -> None:
    assert any(json.loads(p.read_text())["counter_bits"] <= 32 for p in SHARED)


@pytest.mark.parametrize("path", SHARED, ids=lambda p: p.stem)
def test_c_encoders_match_the_shared_vectors(blhost: Path, path: Path) -> None:
    vector = json.loads(path.read_text())
    if vector["counter_bits"] > 32:
        result = encode(blhost, encode_script(vector, "P"))
        assert result.returncode == 2
        assert b"the reference core carries counters of 16 to 32 bits" in result.stderr
        return
    for form, key in (("L", "line_hex"), ("P", "packed_hex")):
        result = encode(blhost, encode_script(vector, form))
        assert result.returncode == 0, result.stderr
        assert result.stdout.hex() == vector[key], f"{path.stem}, form {form}"


FIRMWARE_VECTORS = sorted(VECTORS.glob("firmware_*.json"))


def test_firmware_vectors_exist() -> None:
    assert FIRMWARE_VECTORS


@pytest.mark.parametrize("path", FIRMWARE_VECTORS, ids=lambda p: p.stem)
def test_host_port_session_is_byte_exact(blhost: Path, tmp_path: Path, path: Path) -> None:
    """A whole session of the core (firmware_*.json, made by tests/firmware/make_fw_vectors.py):
    the C output must stay byte for byte what it was, and benchlog must decode those bytes to the
    scripted edges."""
    vector = json.loads(path.read_text())
    want = [tuple(row) for row in vector["edges"]]
    for form, key in (("L", "line_hex"), ("P", "packed_hex")):
        data, _ = run_host(blhost, vector["script"], tmp_path, "--form", form, *vector["options"])
        assert data.hex() == vector[key], f"{path.stem}, form {form}"
        assert edge_rows(decode_all(bytes.fromhex(vector[key]))) == want
