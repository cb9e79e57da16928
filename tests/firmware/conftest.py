"""Fixtures of the firmware tests: builds of firmware_ref made once per session in a temporary
directory (never in the source tree). Helpers to run and decode them are in _fw_helpers.py."""

from __future__ import annotations

import subprocess
from pathlib import Path

import pytest
from _fw_helpers import need_file, need_tool

from tests.conftest import HANG_S

FIRMWARE = Path(__file__).resolve().parents[2] / "firmware_ref"
SIMAVR_HEADER = Path("/usr/include/simavr/sim_avr.h")


def _make(build: Path, target: str) -> None:
    result = subprocess.run(
        ["make", "-s", "-C", str(FIRMWARE), f"BUILD={build}", target],
        capture_output=True,
        text=True,
        timeout=HANG_S,
    )
    assert result.returncode == 0, f"make {target} failed:\n{result.stdout}\n{result.stderr}"


@pytest.fixture(scope="session")
def fw_build(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return tmp_path_factory.mktemp("firmware_build")


@pytest.fixture(scope="session")
def blhost(fw_build: Path) -> Path:
    need_tool("make", "make")
    need_tool("gcc", "gcc")
    _make(fw_build, "host")
    return fw_build / "host" / "blhost"


@pytest.fixture(scope="session")
def avr_elf(fw_build: Path) -> Path:
    need_tool("make", "make")
    need_tool("avr-gcc", "gcc-avr")
    need_tool("avr-size", "binutils-avr")
    need_file(Path("/usr/lib/avr/include/avr/io.h"), "avr-libc")
    _make(fw_build, "avr")
    return fw_build / "avr" / "blref.elf"


@pytest.fixture(scope="session")
def blsim(fw_build: Path, avr_elf: Path) -> Path:
    need_tool("gcc", "gcc")
    need_tool("simavr", "simavr")
    need_file(SIMAVR_HEADER, "libsimavr-dev")
    _make(fw_build, "sim")
    return fw_build / "sim" / "blsim"
