"""Small helpers to make actuation and edge batches for store tests (synthetic data, no reference)."""

from __future__ import annotations

import numpy as np

from benchlog.analysis._types import BREAK, MAKE, empty_actuations
from benchlog.events import TimedEdges


def actuations(channels, cycles, *, seed: int = 0, period_ns: int = 100_000_000) -> np.ndarray:
    """One make and one break per cycle for each channel, cycles numbered from cycles[0]."""
    rng = np.random.default_rng(seed)
    chans = np.asarray(list(channels), np.uint8)
    cyc = np.asarray(list(cycles), np.int64)
    n = len(chans) * len(cyc) * 2
    a = empty_actuations(n)
    a["channel"] = np.repeat(chans, len(cyc) * 2)
    a["cycle"] = np.tile(np.repeat(cyc, 2), len(chans))
    a["kind"] = np.tile([MAKE, BREAK], len(chans) * len(cyc))
    a["t_start_ns"] = a["cycle"] * period_ns + (a["kind"] == BREAK) * (period_ns // 2)
    a["t_first_ns"] = a["t_start_ns"] + 5_000_000
    a["t_settle_ns"] = a["t_first_ns"] + 1_000_000
    a["transit_us"] = rng.uniform(3000, 9000, n)
    a["bounce_us"] = rng.gamma(2.0, 400.0, n)
    a["bounce_count"] = rng.integers(0, 6, n)
    a["longest_gap_us"] = a["bounce_us"] / 4
    a["wrong_state_us"] = a["bounce_us"] / 3
    a["transfer_us"] = np.nan
    if "t_end_ns" in a.dtype.names:
        a["t_end_ns"] = a["t_start_ns"] + period_ns // 2
    return a


def edges(channels, n: int, *, t0: int = 0, step: int = 1000) -> TimedEdges:
    chans = np.asarray(list(channels), np.uint8)
    t = t0 + np.arange(n, dtype=np.int64) * step
    return TimedEdges(
        np.tile(t, len(chans)),
        np.repeat(chans, n),
        np.tile((np.arange(n) % 2).astype(np.uint8), len(chans)),
    )


def downgrade_to(engine, revision: str) -> None:
    """Take a store down to an older schema revision, as a store written by that revision holds it.

    Rows are written first with today's `Store` (whose models are the head's), then the schema is
    taken down: the only way to write an old store through the store's own code."""
    from alembic import command

    from benchlog.store._migrate import _config

    command.downgrade(_config(engine), revision)
