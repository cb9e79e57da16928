"""Host-to-sampler commands (docs/protocol.md, "Commands"): ASCII lines ended by `\\n` in both forms."""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Literal

from benchlog.errors import ConfigError

_U32 = 2**32


def _check(ok: bool, message: str) -> None:
    if not ok:
        raise ConfigError(message)


@dataclass(frozen=True, slots=True)
class Who:
    """Ask the sampler to send its announcement again (its counter does not restart)."""


@dataclass(frozen=True, slots=True)
class Ping:
    token: int

    def __post_init__(self) -> None:
        _check(0 <= self.token <= 0xFFFF, f"ping token must be 0-65535, not {self.token}")


@dataclass(frozen=True, slots=True)
class SetForm:
    form: Literal["L", "P"]

    def __post_init__(self) -> None:
        _check(self.form in ("L", "P"), f"form must be 'L' (line) or 'P' (packed), not {self.form!r}")


@dataclass(frozen=True, slots=True)
class Plan:
    """Channel `channel`'s cycle profile: actuator on `on_us`, off `off_us`, `cycles` times (0 = no end)."""

    channel: int
    on_us: int
    off_us: int
    cycles: int

    def __post_init__(self) -> None:
        _check(0 <= self.channel <= 15, f"plan channel must be 0-15, not {self.channel}")
        _check(0 < self.on_us < _U32, f"plan on-time must be 1 to {_U32 - 1} us, not {self.on_us}")
        _check(0 < self.off_us < _U32, f"plan off-time must be 1 to {_U32 - 1} us, not {self.off_us}")
        _check(0 <= self.cycles < _U32, f"plan cycle count must be 0 to {_U32 - 1}, not {self.cycles}")


@dataclass(frozen=True, slots=True)
class Go:
    """Start every channel that has a plan."""


@dataclass(frozen=True, slots=True)
class Halt:
    """Stop cycling, switch every actuator off, forget the plans."""


Command = Who | Ping | SetForm | Plan | Go | Halt


def encode_command(cmd: Command) -> bytes:
    """The command's line, ending with `\\n`."""
    match cmd:
        case Who():
            text = "WHO"
        case Ping(token):
            text = f"PING {token}"
        case SetForm(form):
            text = f"FORM {form}"
        case Plan(channel, on_us, off_us, cycles):
            text = f"PLAN {channel} {on_us} {off_us} {cycles}"
        case Go():
            text = "GO"
        case Halt():
            text = "HALT"
        case _:
            raise ConfigError(f"not a sampler command: {cmd!r}")
    return text.encode("ascii") + b"\n"


_NUMBER = re.compile(r"[0-9]{1,10}")


def _numbers(words: list[str], n: int) -> list[int] | None:
    if len(words) != n or not all(_NUMBER.fullmatch(w) for w in words):
        return None
    return [int(w) for w in words]


def parse_command(line: bytes | str) -> Command | None:
    """The command on `line` (with or without its `\\r\\n`), or None for a line not understood."""
    if isinstance(line, bytes | bytearray):
        try:
            line = bytes(line).decode("ascii")
        except UnicodeDecodeError:
            return None
    line = line.removesuffix("\n").removesuffix("\r")
    if not line.isprintable():
        return None
    words = line.split(" ")
    verb, args = words[0], words[1:]
    try:
        if verb == "WHO" and not args:
            return Who()
        if verb == "GO" and not args:
            return Go()
        if verb == "HALT" and not args:
            return Halt()
        if verb == "FORM" and len(args) == 1 and args[0] in ("L", "P"):
            return SetForm(args[0])  # type: ignore[arg-type]
        if verb == "PING" and (nums := _numbers(args, 1)) is not None:
            return Ping(nums[0])
        if verb == "PLAN" and (nums := _numbers(args, 4)) is not None:
            return Plan(*nums)
    except ConfigError:
        return None
    return None
