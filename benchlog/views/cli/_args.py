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
