"""Clock stage: sampler ticks -> run time (unwrapped, bridged across resets, in ns) and clock drift.

See docs/clock.md.
"""

from benchlog.clock._convert import signed_delta, ticks_to_ns, ticks_to_ns_array
from benchlog.clock._drift import DriftEstimator
from benchlog.clock._timeline import (
    Timed,
    TimedAccepted,
    TimedBeats,
    TimedCounts,
    TimedNotice,
    TimedPong,
    Timeline,
    empty_timed,
    merge_timed,
)

__all__ = [
    "Timeline",
    "Timed",
    "empty_timed",
    "merge_timed",
    "TimedAccepted",
    "TimedBeats",
    "TimedCounts",
    "TimedNotice",
    "TimedPong",
    "DriftEstimator",
    "ticks_to_ns",
    "ticks_to_ns_array",
    "signed_delta",
]
