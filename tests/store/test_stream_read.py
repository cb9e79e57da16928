"""Store.iter_actuations: the rows of Store.actuations, in the same order, in bounded batches."""

from __future__ import annotations

import numpy as np

from tests.store._data import actuations


def test_batches_concatenate_to_the_whole_read_and_stay_bounded(store):
    part = store.register_part("AG-MS5", "Ashgrove Components")
    lot = store.register_lot(part, "L-50")
    units = [store.register_unit(lot, f"AG-{i:03d}") for i in range(3)]
    bench = store.register_bench("bench T")
    w = store.start_run(bench, dict(enumerate(units)), profile={})
    a = actuations([0, 1, 2], range(3000), seed=4)
    a["bounce_us"][::13] = np.nan
    w.add(actuations=a)
    w.close("stopped")
    for filters in ({}, {"units": [units[1]]}, {"kind": "break", "cycles": (100, 2222)}, {"lots": [lot]}):
        whole = store.actuations(**filters)
        parts = list(store.iter_actuations(batch=500, **filters))
        assert all(0 < len(p) <= 500 for p in parts)
        got = np.concatenate(parts)
        assert got.dtype == whole.dtype and len(got) == len(whole)
        for name in whole.dtype.names:
            np.testing.assert_array_equal(got[name], whole[name])  # NaN equal to NaN
    assert list(store.iter_actuations(units=[units[0]], cycles=(5000, 6000))) == []
