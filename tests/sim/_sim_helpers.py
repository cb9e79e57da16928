"""Measuring a simulated bench from its records, independently of benchlog.analysis.

The records go through the real encoder and decoder; ticks are unwrapped here with the plain modular
difference (valid because beats come at least every quarter wrap), so these helpers check the
simulator's stream, not the clock stage.
"""

from __future__ import annotations

import numpy as np

from benchlog.sim import Bench
from benchlog.wire import Announce, Beat, Decoder, Drive, Edges


def decode_all(bench: Bench, data: bytes) -> list:
    return Decoder().feed(data)


def unwrap_stream(records: list, counter_bits: int) -> dict[str, np.ndarray]:
    """Edges and drives of one session (no reset inside) with unwrapped ticks, in stream order."""
    kinds, chans, levels, ticks = [], [], [], []
    for r in records:
        if isinstance(r, Edges):
            kinds.append(np.zeros(len(r), np.uint8))
            chans.append(r.channel)
            levels.append(r.level)
            ticks.append(r.tick.astype(np.int64))
        elif isinstance(r, Drive):
            kinds.append(np.ones(1, np.uint8))
            chans.append(np.array([r.channel], np.uint8))
            levels.append(np.array([r.level], np.uint8))
            ticks.append(np.array([r.tick], np.int64))
        elif isinstance(r, Beat):
            kinds.append(np.full(1, 2, np.uint8))
            chans.append(np.zeros(1, np.uint8))
            levels.append(np.zeros(1, np.uint8))
            ticks.append(np.array([r.tick], np.int64))
    kind = np.concatenate(kinds)
    tick = np.concatenate(ticks)
    mod = 1 << counter_bits
    step = np.diff(tick, prepend=tick[:1]) % mod
    step[step > mod // 2] -= mod  # per-channel order only: a small step back is not a wrap
    return {
        "kind": kind,
        "channel": np.concatenate(chans),
        "level": np.concatenate(levels),
        "tick": tick[0] + np.cumsum(step),
    }


def actuations(stream: dict[str, np.ndarray], channel: int) -> list[dict]:
    """Per drive switching on `channel`: the edges until the next switching (a plain loop: test code)."""
    sel = stream["channel"] == channel
    kind, level, tick = stream["kind"][sel], stream["level"][sel], stream["tick"][sel]
    # beats are not per-channel; drop them
    keep = kind != 2
    kind, level, tick = kind[keep], level[keep], tick[keep]
    drives = np.flatnonzero(kind == 1)
    out = []
    for i, d in enumerate(drives):
        end = drives[i + 1] if i + 1 < len(drives) else len(kind)
        out.append(
            {
                "drive": int(level[d]),
                "t0": int(tick[d]),
                "levels": level[d + 1 : end],
                "ticks": tick[d + 1 : end],
            }
        )
    return out


def announcements(records: list) -> list[Announce]:
    return [r for r in records if isinstance(r, Announce)]
