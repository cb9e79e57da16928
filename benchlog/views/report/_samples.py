"""The boundary between the store's distribution summaries and benchlog.stats.

`summary_samples` turns `Store.summaries(...)` into the same `{metric: UnitSample}` mapping that
`benchlog.stats.metric_samples` builds from raw actuations: one value per occupied histogram bin of a
unit, weighted by its exact count (`UnitSample.weights`), with the unit's exact sum and sum of
squares (`UnitSample.moments`). Counts, means, spreads and per-unit maxima are exact; every
percentile is within the store's stated resolution (docs/store.md).

Each unit's minimum and maximum enter as values of their own (weight 1, taken from the unit's lowest
and highest bins), so per-unit extremes are exact too. A time bin holding k >= 2 values enters as two
points: one value just below the bin's value (weight 1) and the bin's value (weight k - 1). Raw
values are almost never tied, and the pooled quantile interpolates between *distinct* values
present, so a bin must read as "one step up from the bin below, then flat", not as k tied values
(which would interpolate across all k of them).
"""

from __future__ import annotations

import numpy as np

from benchlog.stats import METRICS, UnitSample

__all__ = ["SERIES_OF_METRIC", "summary_samples"]

# stats metric -> store series
SERIES_OF_METRIC: dict[str, str] = {
    key: ("cycle.chatter" if m.kind == "rate" else f"{m.rows}.{m.column}") for key, m in METRICS.items()
}
_BELOW = 1e-9  # relative step below a bin's value for its first value


def summary_samples(summaries: dict, label_of: dict[int, str]) -> dict[str, UnitSample]:
    """`summaries`: series -> benchlog.store SeriesSummary; `label_of`: unit id -> label (serial)."""
    out: dict[str, UnitSample] = {}
    for key, series in SERIES_OF_METRIC.items():
        sm = summaries.get(series)
        if sm is None or not len(sm.bins):
            out[key] = UnitSample.of(np.zeros(0), np.zeros(0, str))
            continue
        values, counts, unit = sm.values(), sm.bin_count.astype(np.float64), sm.bin_unit
        if not sm.integer:
            values, counts, unit = _exact_ends(sm, values, counts, unit)
            split = counts >= 2
            values = np.concatenate((values, values[split] - np.abs(values[split]) * _BELOW))
            counts = np.concatenate((np.where(split, counts - 1, counts), np.ones(int(split.sum()))))
            unit = np.concatenate((unit, unit[split]))
        ids, at = np.unique(unit, return_inverse=True)
        names = np.array([label_of.get(int(u), str(int(u))) for u in ids], dtype=object).astype(str)
        sample = UnitSample.of(values, names[at], counts)
        # exact moments, in the sample's unit order (its codes sort the labels)
        row = {str(n): i for i, n in enumerate(names)}
        pos = np.searchsorted(sm.unit_id, ids)
        order = np.array([row[n] for n in sample.unit_names])
        moments = np.stack((sm.sum[pos][order], sm.sumsq[pos][order]))
        out[key] = UnitSample(sample.values, sample.unit, sample.unit_names, sample.weights, moments)
    return out


def _exact_ends(sm, values, counts, unit):
    """Take one count from each unit's highest bin for its exact maximum, and one from its lowest bin
    (if any is left) for its exact minimum."""
    counts = counts.copy()
    first = np.flatnonzero(np.r_[True, unit[1:] != unit[:-1]])
    last = np.r_[first[1:] - 1, len(unit) - 1]
    pos = np.searchsorted(sm.unit_id, unit[first])
    counts[last] -= 1
    has_min = counts[first] >= 1
    counts[first[has_min]] -= 1
    keep = counts > 0
    return (
        np.concatenate((values[keep], sm.max[pos], sm.min[pos][has_min])),
        np.concatenate((counts[keep], np.ones(len(first) + int(has_min.sum())))),
        np.concatenate((unit[keep], unit[first], unit[first][has_min])),
    )
