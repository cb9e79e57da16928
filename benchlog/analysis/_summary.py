"""Per-channel summaries of an actuation table (what `benchlog analyze` prints)."""

from __future__ import annotations

from typing import Any

import numpy as np

from benchlog.analysis._spec import VERDICT_NAMES, PartSpec, unit_verdict
from benchlog.analysis._types import BREAK, INCOMPLETE, MAKE, MISSED, NO_CHANGE, STUCK


def _dist(values: np.ndarray) -> dict[str, float | None]:
    v = values[~np.isnan(values)]
    if not len(v):
        return {"n": 0, "p50": None, "p95": None, "max": None}
    p50, p95 = np.percentile(v, [50, 95])
    return {"n": int(len(v)), "p50": float(p50), "p95": float(p95), "max": float(v.max())}


def _counts(rows: np.ndarray) -> np.ndarray:
    return rows["bounce_count"][(rows["flags"] & (MISSED | STUCK)) == 0].astype(np.float64)


def summarize(actuations: np.ndarray, spec: PartSpec | None = None) -> list[dict[str, Any]]:
    """One dict per channel: counts, p50/p95/max (us) of bounce and transit times, and the verdict."""
    out = []
    for c in np.unique(actuations["channel"]):
        rows = actuations[actuations["channel"] == c]
        flags = rows["flags"]
        good = rows[(flags & (INCOMPLETE | NO_CHANGE)) == 0]
        makes, breaks = good[good["kind"] == MAKE], good[good["kind"] == BREAK]
        entry: dict[str, Any] = {
            "channel": int(c),
            "actuations": int(len(rows)),
            "makes": int((rows["kind"] == MAKE).sum()),
            "breaks": int((rows["kind"] == BREAK).sum()),
            "cycles": int(rows["cycle"].max() + 1) if len(rows) else 0,
            "incomplete": int(((flags & INCOMPLETE) != 0).sum()),
            "missed": int(((flags & MISSED) != 0).sum()),
            "stuck": int(((flags & STUCK) != 0).sum()),
            "no_change": int(((flags & NO_CHANGE) != 0).sum()),
            "glitches": int(good["glitches"].clip(min=0).sum()),
            "chatter_events": int(good["chatter"].clip(min=0).sum()),
            "make_bounce_us": _dist(makes["bounce_us"]),
            "break_bounce_us": _dist(breaks["bounce_us"]),
            # a missed or stuck actuation has no bounce to count, as it has no bounce time
            "make_bounce_count": _dist(_counts(makes)),
            "break_bounce_count": _dist(_counts(breaks)),
            "operate_us": _dist(good["transit_us"][good["drive_level"] == 1]),
            "release_us": _dist(good["transit_us"][good["drive_level"] == 0]),
            "transfer_us": _dist(good["transfer_us"]),
        }
        if spec is not None:
            verdict, reason = unit_verdict(rows, spec)
            entry["verdict"] = VERDICT_NAMES[verdict]
            entry["reason"] = reason
        out.append(entry)
    return out
