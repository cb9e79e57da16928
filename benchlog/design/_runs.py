"""Sampling a recorded contact at a fixed period, kept as run lengths instead of samples.

A firmware debouncer sees the contact only at its sample instants `k * ts`. Between two edges the contact
is constant, so the sampled sequence is a few long runs: edge `i` is first seen by sample
`ceil(t_i / ts)`, and run `i` lasts until the next edge's first sample. Runs that no sample sees
(bounce shorter than the period) vanish, and neighbours of equal value merge. Every debouncer below works
on these runs, so a night of recording costs as much as its edges, not as its samples.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from benchlog.errors import DataError


@dataclass(frozen=True, slots=True, eq=False)
class SampledRuns:
    """Alternating runs of the sampled contact. `start` is a sample index (time = start * ts_ns)."""

    value: np.ndarray  # int8, 1 = closed; neighbours always differ
    start: np.ndarray  # int64 sample index of the run's first sample
    length: np.ndarray  # int64 samples
    ts_ns: int

    def __len__(self) -> int:
        return len(self.value)


def sample_runs(
    t_ns: np.ndarray, level: np.ndarray, ts_ns: int, initial: int | None = None, t_end_ns: int | None = None
) -> SampledRuns:
    """Runs of one channel's contact sampled every `ts_ns`, from one sample before its first edge.

    `initial` is the level before the first edge (default: the opposite of the first edge's level);
    the last run ends at `t_end_ns` (default: one period after the last edge).
    """
    t = np.asarray(t_ns, np.int64)
    lv = np.asarray(level, np.int8)
    if ts_ns <= 0:
        raise DataError(f"sampling period must be positive, got {ts_ns} ns")
    if len(t) == 0:
        raise DataError("no edges on this channel")
    if np.any(np.diff(t) < 0):
        raise DataError("edge times must not decrease")
    first_sample = -(-t // ts_ns)  # ceil
    k0 = first_sample[0] - 1
    init = int(1 - lv[0]) if initial is None else int(initial)
    end_t = int(t[-1]) + ts_ns if t_end_ns is None else int(t_end_ns)
    k_end = max(-(-end_t // ts_ns), int(first_sample[-1]) + 1)
    starts = np.concatenate(([k0], first_sample))
    values = np.concatenate(([init], lv)).astype(np.int8)
    ends = np.concatenate((first_sample, [k_end]))
    seen = ends > starts
    starts, values, ends = starts[seen], values[seen], ends[seen]
    # a later edge at the same first sample wins: keep the last run starting at each sample
    keep = np.concatenate((starts[1:] != starts[:-1], [True]))
    starts, values = starts[keep], values[keep]
    change = np.concatenate(([True], values[1:] != values[:-1]))
    starts, values = starts[change], values[change]
    lengths = np.diff(np.concatenate((starts, [k_end])))
    return SampledRuns(values, starts.astype(np.int64), lengths.astype(np.int64), int(ts_ns))
