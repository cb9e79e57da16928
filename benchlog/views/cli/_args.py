"""Argument types the commands share: numbers within bounds, with a one-line message when not."""

from __future__ import annotations

import argparse
import math
from collections.abc import Callable


def number_within(
    low: float | None = None,
    high: float | None = None,
    *,
    low_inclusive: bool = False,
    high_inclusive: bool = False,
) -> Callable[[str], float]:
    """An argparse `type` accepting a finite number between `low` and `high`."""
    left = "[" if low_inclusive else "("
    right = "]" if high_inclusive else ")"
    if low is not None and high is not None:
        wanted = f"in {left}{low:g}, {high:g}{right}"
    elif low is not None:
        wanted = f"{'>=' if low_inclusive else '>'} {low:g}"
    else:
        wanted = f"{'<=' if high_inclusive else '<'} {high:g}"

    def parse(text: str) -> float:
        try:
            value = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
        ok = math.isfinite(value)
        if low is not None:
            ok = ok and (value >= low if low_inclusive else value > low)
        if high is not None:
            ok = ok and (value <= high if high_inclusive else value < high)
        if not ok:
            raise argparse.ArgumentTypeError(f"must be {wanted}, got {text}")
        return value

    parse.__name__ = "number"
    return parse


positive = number_within(0)
non_negative = number_within(0, low_inclusive=True)
fraction = number_within(0, 1)


PROFILE_METAVAR = "ON_MS:OFF_MS:CYCLES"


def profile(text: str):
    """A cycle profile `ON_MS:OFF_MS:CYCLES` (CYCLES 0 = until stopped), as every command takes it."""
    from benchlog.errors import ConfigError
    from benchlog.recorder._setup import parse_profile

    try:
        return parse_profile(text)
    except ConfigError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def add_profile(p, help_text: str) -> None:
    """`--profile ON_MS:OFF_MS:CYCLES`: the one spelling of a cycle profile."""
    p.add_argument("--profile", type=profile, metavar=PROFILE_METAVAR, help=help_text)


JSON_HELP = "print one JSON document on standard output instead of text"


def add_output(p, help_text: str, default: str | None = None) -> None:
    """`-o/--output FILE`: the one name of a file a command writes."""
    p.add_argument("-o", "--output", metavar="FILE", default=default, help=help_text)
