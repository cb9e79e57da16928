"""Distribution summaries (revision 0006): what the recorder keeps as it writes, checked against numpy
on the stored actuations, across uneven batches, a resume and the migration that builds them."""

from __future__ import annotations

import numpy as np
import pytest
from alembic import command

from benchlog.analysis._types import BREAK, INCOMPLETE, MAKE, NO_CHANGE, STUCK
from benchlog.store import RESOLUTION, SERIES, SUMMARY_WINDOW
from benchlog.store._migrate import _config, current_revision, head_revision
from benchlog.store._summary import bin_values, is_integer, weighted_percentile
from tests.store._data import actuations

NOT_MEASURED = INCOMPLETE | STUCK | NO_CHANGE


def _batch(cycles, seed):
    a = actuations([0, 1, 2], cycles, seed=seed)
    rng = np.random.default_rng(seed)
    a["chatter"] = rng.choice([0, 0, 0, 0, 1, 2], len(a))
    a["drive_level"] = np.where(a["kind"] == MAKE, 1, 0)
    a["bounce_us"][rng.random(len(a)) < 0.05] = np.nan
    a["flags"][rng.random(len(a)) < 0.03] |= INCOMPLETE
    a["flags"][rng.random(len(a)) < 0.02] |= STUCK
    a["bounce_us"][::97] = 0.0  # zero sits in a bin of its own
    return a[np.lexsort((a["kind"], a["channel"], a["cycle"]))]


def _record(store):
    part = store.register_part("AG-MS5", "Ashgrove Components")
    lot = store.register_lot(part, "L-40")
    units = [store.register_unit(lot, f"AG-{i:03d}") for i in range(3)]
    bench = store.register_bench("bench S")
    w = store.start_run(bench, dict(enumerate(units)), profile={}, rollup_window=100)
    a = _batch(range(2500), 1)
    cuts = [0, 1, 777, 3001, 3002, 9999, 12345, len(a)]  # odd cuts split cycles between batches
    for lo, hi in zip(cuts[:-1], cuts[1:], strict=True):
        w.add(actuations=a[lo:hi])
        w.flush()
    run_id = w.run_id
    w.close("stopped")
    w2 = store.resume_run(run_id)  # the sampler counts from 0 again: life cycles carry on at 2500
    b = _batch(range(800), 2)
    w2.add(actuations=b[:1001])
    w2.flush()
    w2.add(actuations=b[1001:])
    w2.close("target")
    return units


def _raw(acts: np.ndarray, series: str, unit: int) -> tuple[np.ndarray, np.ndarray]:
    """The raw values a series holds for one unit and the cycle of each, with numpy from the stored rows."""
    which, column = SERIES[series]
    a = acts[(acts["unit_id"] == unit) & ((acts["flags"] & NOT_MEASURED) == 0)]
    if which == "cycle":
        cyc, inv = np.unique(a["cycle"], return_inverse=True)
        return np.bincount(inv, a["chatter"].astype(float), len(cyc)), cyc
    sel = {
        "make": a["kind"] == MAKE,
        "break": a["kind"] == BREAK,
        "operate": a["drive_level"] == 1,
        "release": a["drive_level"] == 0,
    }[which]
    v, c = a[column][sel].astype(float), a["cycle"][sel]
    return v[np.isfinite(v)], c[np.isfinite(v)]


def _reference(acts: np.ndarray, series: str, unit: int) -> np.ndarray:
    """The raw values a series holds for one unit, computed with numpy from the stored rows."""
    return _raw(acts, series, unit)[0]


def _check_against_raw(store, units) -> None:
    acts = store.actuations()
    got = store.summaries()
    assert set(got) == set(SERIES)
    for series, sm in got.items():
        for i, unit in enumerate(units):
            ref = _reference(acts, series, unit)
            k = int(np.searchsorted(sm.unit_id, unit))
            assert sm.unit_id[k] == unit
            assert sm.count[k] == len(ref)  # counts exact
            assert sm.min[k] == ref.min() and sm.max[k] == ref.max()  # extremes exact
            np.testing.assert_allclose(sm.sum[k], ref.sum(), rtol=1e-12)
            np.testing.assert_allclose(sm.sumsq[k], (ref**2).sum(), rtol=1e-12)
            mine = sm.bin_unit == unit
            assert sm.bin_count[mine].sum() == len(ref)
            values = sm.values()[mine]
            if sm.integer:  # one bin per integer: the histogram is the values' exact tally
                uv, uc = np.unique(ref, return_counts=True)
                assert np.array_equal(values, uv) and np.array_equal(sm.bin_count[mine], uc)
            for p in (0, 1, 50, 90, 95, 99, 99.9, 100):
                # numpy's default percentile of the raw values (the reference) against the histogram's
                want = np.percentile(ref, p)
                have = weighted_percentile(values, sm.bin_count[mine], p)
                assert abs(have - want) <= RESOLUTION * abs(want) + 1e-12, (series, i, p, have, want)


def test_summaries_agree_with_the_raw_actuations_across_batches_and_a_resume(store):
    units = _record(store)
    _check_against_raw(store, units)
    # windows of SUMMARY_WINDOW life cycles: 0-999, 1000-1999, 2000-2999 (split by the resume), 3000-3299
    unit, window, count, pct = store.summary_windows("make.bounce_count", units=[units[0]], percentiles=(50,))
    assert list(window) == [0, 1, 2, 3]
    acts = store.actuations(units=[units[0]], kind="make")
    acts = acts[(acts["flags"] & NOT_MEASURED) == 0]
    assert list(count) == [int(((acts["cycle"] // SUMMARY_WINDOW) == w).sum()) for w in range(4)]
    for w, p50 in zip(window, pct[:, 0], strict=True):
        assert p50 == np.percentile(acts["bounce_count"][(acts["cycle"] // SUMMARY_WINDOW) == w], 50)


def test_bins_represent_their_values_within_the_stated_resolution():
    from benchlog.store._summary import bin_of

    v = np.concatenate([np.geomspace(1e-3, 1e7, 200_001), -np.geomspace(1e-2, 1e4, 1001), [0.0]])
    rep = bin_values(bin_of(v, False), False)
    assert np.all(np.abs(rep - v) <= RESOLUTION * np.abs(v))
    assert abs(RESOLUTION - 0.00271) < 1e-5  # the figure docs/store.md states
    ints = np.arange(0, 5000, dtype=float)
    assert np.array_equal(bin_values(bin_of(ints, True), True), ints)


def test_upgrade_builds_the_same_summaries_from_stored_rows(store):
    units = _record(store)
    before = store.summaries()
    command.downgrade(_config(store.engine), "0005")  # drops the table
    command.upgrade(_config(store.engine), "head")  # and builds it again from the actuations
    assert current_revision(store.engine) == head_revision()
    after = store.summaries()
    assert set(after) == set(before)
    for series, a in before.items():
        b = after[series]
        for f in ("unit_id", "count", "min", "max", "bin_unit", "bins", "bin_count"):
            assert np.array_equal(getattr(a, f), getattr(b, f)), (series, f)
        np.testing.assert_allclose(a.sum, b.sum, rtol=1e-12)
    _check_against_raw(store, units)


def _reference_windows(acts: np.ndarray, series: str, unit: int) -> dict[int, np.ndarray]:
    """The raw values of one unit's series, window by window (cycle // SUMMARY_WINDOW), with numpy."""
    v, c = _raw(acts, series, unit)
    w = c // SUMMARY_WINDOW
    return {int(k): v[w == k] for k in np.unique(w)}


@pytest.mark.parametrize("fetch", [3, 2000], ids=["rows-split-over-reads", "whole-reads"])
def test_every_window_of_every_series_agrees_with_numpy(store, monkeypatch, fetch):
    """`summary_windows` (figures of all windows at once) against numpy.percentile of each window's raw
    values (the reference): counts exact, percentiles within the histogram's RESOLUTION, and exact for
    integer series (one bin per integer). Reading 3 rows at a time splits a window's pieces (the resume
    cuts window 2 in two runs) over several reads."""
    from benchlog.store import _summary_read

    monkeypatch.setattr(_summary_read, "_FETCH", fetch)
    units = _record(store)
    acts = store.actuations()
    ps = (0.0, 5.0, 50.0, 95.0, 99.9, 100.0)
    for series in SERIES:
        unit, window, count, pct = store.summary_windows(series, units=units, percentiles=ps)
        assert np.all(np.diff(unit * 10**6 + window) > 0)  # sorted by unit and window, each once
        got = {(int(u), int(w)): (int(n), p) for u, w, n, p in zip(unit, window, count, pct, strict=True)}
        want = {(u, w): v for u in units for w, v in _reference_windows(acts, series, u).items()}
        assert set(got) == set(want), series
        for key, ref in want.items():
            n, have = got[key]
            assert n == len(ref), (series, key)
            for p, h in zip(ps, have, strict=True):
                r = np.percentile(ref, p)
                if is_integer(series):
                    assert h == r, (series, key, p, h, r)
                else:
                    assert abs(h - r) <= RESOLUTION * abs(r) + 1e-12, (series, key, p, h, r)
