"""Shared parts of the firmware tests: builds of firmware_ref made once per session in a temporary
directory (never in the source tree), and helpers to run and decode them. Test modules import the
fixtures from here."""

from __future__ import annotations

import importlib.util
import os
import subprocess
from pathlib import Path

import numpy as np
import pytest

from benchlog.wire import Decoder, Edges
from tests.conftest import HANG_S

_ROOT_CONFTEST = Path(__file__).resolve().parents[1] / "conftest.py"
_spec = importlib.util.spec_from_file_location("_benchlog_root_conftest", _ROOT_CONFTEST)
_root = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(_root)
need_tool = _root.need_tool  # tests/conftest.py: skip locally naming the package, fail in CI

SIMAVR_HEADER = Path("/usr/include/simavr/sim_avr.h")


def need_file(path: Path, package: str) -> None:
    """Like `need_tool`, for a header or library that has no command to look for."""
    if path.exists():
        return
    message = f"needs {path}: install the Debian package {package}"
    if os.environ.get("BENCHLOG_REQUIRE_ALL"):
        pytest.fail(message)
    pytest.skip(message)


def run_host(blhost: Path, script: str, tmp_path: Path, *options: str) -> tuple[bytes, str]:
    """Run the host port on `script`; returns its output bytes and its stderr summary."""
    path = tmp_path / "script.txt"
    path.write_text(script)
    result = subprocess.run(
        [str(blhost), "run", *options, str(path)], capture_output=True, timeout=HANG_S, check=False
    )
    assert result.returncode == 0, result.stderr.decode()
    return result.stdout, result.stderr.decode()


def decode_all(data: bytes) -> list:
    """Every record from one stream, fed whole."""
    return Decoder().feed(data)


def edge_rows(records: list) -> list[tuple[int, int, int]]:
    """All edges as (channel, level, tick) rows, in stream order."""
    batches = [r for r in records if isinstance(r, Edges)]
    if not batches:
        return []
    ch = np.concatenate([b.channel for b in batches])
    lv = np.concatenate([b.level for b in batches])
    tk = np.concatenate([b.tick for b in batches])
    return list(zip(ch.tolist(), lv.tolist(), tk.tolist(), strict=True))


def others(records: list) -> list:
    return [r for r in records if not isinstance(r, Edges)]
