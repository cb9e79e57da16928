"""The actuation table: one row per make or break of one channel. Stable contract for store and views.

Columns may be added at the end; none is renamed or removed without a migration in db/.
Times are ns (int64) in run time; durations are microseconds (float64, NaN = not applicable).
"""

from __future__ import annotations

import numpy as np

MAKE = 0  # contact goes from open to closed
BREAK = 1  # contact goes from closed to open

# flags (bit mask)
INCOMPLETE = 1 << 0  # overlaps a data gap, reset or the end of data: not measured
MISSED = 1 << 1  # the expected final state was never reached (missed make / failed to open)
STUCK = 1 << 2  # the contact never left its state at all (welded / stuck)
FREE_RUNNING = 1 << 3  # no drive record anchors it: transit time not available
GLITCHY = 1 << 4  # contains pulses below the glitch floor (counted in `glitches`)
CHATTER = 1 << 5  # the stable period after it had chatter events
NO_CHANGE = 1 << 6  # driven, but the contact already sat in the expected state (nothing to measure)

FREE = 255  # drive_level of a free-running actuation

PASS = 0
MARGINAL = 1
FAIL = 2
NO_VERDICT = 255

ACTUATION_DTYPE = np.dtype(
    [
        ("channel", np.uint8),
        ("kind", np.uint8),  # MAKE or BREAK
        ("cycle", np.int64),  # cycle index on the channel (drive-on count), or running count if free
        ("t_start_ns", np.int64),  # drive record time, or the first edge when free-running
        ("t_first_ns", np.int64),  # first transition toward the new state (-1: none)
        ("t_settle_ns", np.int64),  # start of the final stable state (-1: none)
        ("transit_us", np.float64),  # operate time (make) or release time (break), bounce excluded
        ("bounce_us", np.float64),  # first transition to start of final stable state
        ("bounce_count", np.int32),  # reopenings (make) / reclosings (break) after the first transition
        ("longest_gap_us", np.float64),  # longest single excursion back to the old state during bounce
        ("wrong_state_us", np.float64),  # total time in the old state between first touch and settling
        ("glitches", np.int32),  # pulses shorter than the glitch floor
        ("chatter", np.int32),  # chatter events in the stable period that follows
        ("transfer_us", np.float64),  # form C pair: break-before-make gap (+) or overlap (-)
        ("flags", np.uint16),
        ("verdict", np.uint8),  # PASS / MARGINAL / FAIL / NO_VERDICT
        ("t_end_ns", np.int64),  # end of the stable period that follows (next actuation or end of data)
        ("drive_level", np.uint8),  # the drive that started it: 1 on (operate), 0 off (release), 255 none
    ]
)


def empty_actuations(n: int = 0) -> np.ndarray:
    return np.zeros(n, dtype=ACTUATION_DTYPE)


_ROW = np.dtype((np.void, ACTUATION_DTYPE.itemsize))


def concat_actuations(parts) -> np.ndarray:
    """`np.concatenate` of actuation tables, copying rows as plain bytes (numpy copies a structured
    array field by field, several times slower)."""
    parts = [p for p in parts if len(p)]
    if not parts:
        return empty_actuations()
    if len(parts) == 1:
        return parts[0]
    return np.concatenate([p.view(_ROW) for p in parts]).view(ACTUATION_DTYPE)
