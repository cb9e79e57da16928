import zlib

import numpy as np
import pytest
from sqlalchemy import text, update

from benchlog.analysis._types import BREAK, INCOMPLETE, MAKE
from benchlog.errors import DataError, StoreBusyError, StoreError
from benchlog.events import Incident
from benchlog.store import ROLLUP_METRICS, STORED_ACTUATION_DTYPE
from benchlog.store import _schema as sch
from benchlog.store._codec import decode_edges, encode_edges
from benchlog.store._rollup import group_stats
from tests.store._data import actuations, edges


def _setup(store, n_units=2, window=10):
    part = store.register_part(
        "VS-505", "Vellmar Switchgear", spec_toml="[make]\nbounce_ms = 3\n", spec={"make": {"bounce_ms": 3}}
    )
    lot = store.register_lot(part, "L-2026-07")
    units = [store.register_unit(lot, f"VS-{i:03d}") for i in range(n_units)]
    bench = store.register_bench("bench A", board_id="SIM-1", clock_hz=1_000_000, channels=8)
    writer = store.start_run(
        bench,
        dict(enumerate(units)),
        profile={"on_ms": 50, "off_ms": 50},
        target_cycles=100,
        rollup_window=window,
    )
    return part, lot, units, bench, writer


def test_actuations_round_trip_with_nan_and_unit_ids(store):
    _, _, units, _, w = _setup(store)
    a = actuations([0, 1], range(30))
    a["flags"][5] = INCOMPLETE
    w.add(actuations=a)
    w.flush()
    got = store.actuations(units=units)
    assert got.dtype == STORED_ACTUATION_DTYPE
    assert len(got) == len(a)
    for ch, unit in enumerate(units):
        mine = got[got["unit_id"] == unit]
        src = a[a["channel"] == ch]
        src = src[np.lexsort((src["kind"], src["cycle"]))]
        for name in a.dtype.names:
            np.testing.assert_array_equal(mine[name], src[name], err_msg=name)  # NaN == NaN here
    assert np.isnan(got["transfer_us"]).all()
    assert (got["run_id"] == w.run_id).all()
    assert len(store.actuations(parts=["VS-505"], kind="break")) == len(a) // 2
    assert len(store.actuations(units=[units[0]], cycles=(10, 19))) == 20
    w.close("stopped")


def test_percentiles_match_numpy():
    # numpy.percentile (method "linear", the default) is the reference definition
    rng = np.random.default_rng(3)
    group = np.sort(rng.integers(0, 40, 2000))
    values = rng.gamma(2.0, 3.0, 2000)
    values[rng.random(2000) < 0.1] = np.nan
    _, group = np.unique(group, return_inverse=True)
    counts, stats = group_stats(group, np.column_stack([values, values * 2]))
    for g in range(group.max() + 1):
        v = values[group == g]
        v = v[~np.isnan(v)]
        assert counts[g, 0] == counts[g, 1] == len(v)
        np.testing.assert_allclose(stats[g, 0], [np.percentile(v, 50), np.percentile(v, 95), v.max()])
        np.testing.assert_allclose(stats[g, 1], 2 * stats[g, 0])


def test_rollups_and_trend(store):
    _, _, units, _, w = _setup(store, window=10)
    a = actuations([0, 1], range(35))
    for lo in range(0, 35, 7):  # arrive in uneven batches
        w.add(actuations=a[(a["cycle"] >= lo) & (a["cycle"] < lo + 7)])
        w.flush()
    tr = store.trend(units[0], "bounce_us", kind="make")
    assert list(tr.cycle_lo) == [0, 10, 20]  # the open window (30..34) waits for the next one
    w.close("stopped")
    tr = store.trend(units[0], "bounce_us", kind=MAKE)
    assert list(tr.cycle_lo) == [0, 10, 20, 30] and list(tr.cycle_hi) == [9, 19, 29, 34]
    src = a[(a["channel"] == 0) & (a["kind"] == MAKE)]
    for i, lo in enumerate(tr.cycle_lo):
        v = src["bounce_us"][(src["cycle"] >= lo) & (src["cycle"] <= tr.cycle_hi[i])]
        assert tr.count[i] == len(v)
        assert tr.p50[i] == pytest.approx(np.percentile(v, 50))
        assert tr.p95[i] == pytest.approx(np.percentile(v, 95))
        assert tr.max[i] == pytest.approx(v.max())
    assert len(store.trend(units[1], "transit_us", kind="break")) == 4
    latest = {u.channel: u.latest for u in store.run_units(w.run_id)}
    assert latest[0][("make", "bounce_us")].cycle_lo == 30
    assert set(latest[1]) == {(k, m) for k in ("make", "break") for m in ROLLUP_METRICS}
    with pytest.raises(DataError):
        store.trend(units[0], "colour")


def test_edge_chunks_decode_with_plain_zlib():
    t = np.cumsum(np.random.default_rng(1).integers(1, 10_000, 1000)).astype(np.int64) + 10**12
    lv = (np.arange(1000) % 2).astype(np.uint8)
    lo, hi, t_data, l_data = encode_edges(t, lv)
    assert (lo, hi) == (t[0], t[-1])
    # decoded with zlib itself (RFC 1950) and numpy, independent of decode_edges
    deltas = np.frombuffer(zlib.decompress(t_data), "<i8")
    np.testing.assert_array_equal(lo + np.cumsum(deltas), t)
    np.testing.assert_array_equal(np.unpackbits(np.frombuffer(zlib.decompress(l_data), np.uint8))[:1000], lv)
    t2, lv2 = decode_edges(lo, 1000, t_data, l_data)
    np.testing.assert_array_equal(t2, t)
    np.testing.assert_array_equal(lv2, lv)
    assert len(t_data) < t.nbytes / 2


def test_edges_by_time_and_cycle(store):
    _, _, units, _, w = _setup(store)
    a = actuations([0, 1], range(20))  # cycle c starts at c * 100 ms
    w.add(actuations=a, edges=edges([0, 1], 400, step=5_000_000))  # an edge every 5 ms for 2 s
    w.flush()
    w.add(edges=edges([0], 100, t0=2_000_000_000, step=5_000_000))
    w.flush()
    e = store.edges(units[0])
    assert len(e) == 500 and (e.channel == 0).all() and np.all(np.diff(e.t_ns) > 0)
    part = store.edges(units[0], t_ns=(1_000_000_000, 1_099_999_999))
    assert len(part) == 20 and part.t_ns[0] == 1_000_000_000
    cyc = store.edges(units[1], cycles=(3, 4))  # 300 ms .. just before cycle 5 at 500 ms
    assert cyc.t_ns[0] == 300_000_000 and cyc.t_ns[-1] == 495_000_000
    w.close("stopped")


def test_incidents_life_and_verbatim_names(store):
    nasty = 'O\'Brien "lot"; DROP TABLE units; -- <b>[red]x[/red]</b> %s {0} \\n'
    part = store.register_part(nasty, nasty)
    lot = store.register_lot(part, nasty)
    u = [store.register_unit(lot, nasty + str(i), notes=nasty) for i in range(3)]
    bench = store.register_bench(nasty)
    w = store.start_run(bench, {0: u[0], 1: u[1], 2: u[2]}, profile={"name": nasty})
    w.add(actuations=actuations([0, 1, 2], range(50)))
    w.add(incidents=[Incident("disconnect", 10, 20, 1_000, 10_001_000, 7, None, nasty)])
    w.mark_failed(u[1], 31, "welded", nasty)
    w.close("stopped")
    store.set_unit_status(u[2], "removed", detail="pulled for teardown")
    assert [x.serial for x in store.units(part=nasty)] == [nasty + "0", nasty + "1", nasty + "2"]
    assert store.units(ids=[u[0]])[0].notes == nasty
    assert store.benches()[0].name == nasty and store.parts()[0].supplier == nasty
    assert store.run(w.run_id).profile == {"name": nasty}
    (inc,) = store.incidents(w.run_id)
    assert inc.detail == nasty and inc.edges_lost == 7 and inc.duration_s == pytest.approx(0.01)
    life = store.life_table(lot=nasty)
    assert list(life.cycles) == [50, 31, 50]
    assert list(life.failed) == [False, True, False]
    assert life.mode == [None, "welded", None]
    run = store.run(w.run_id)
    assert run.units == 3 and run.units_failed == 1 and run.incidents == 1 and run.state == "ended"


def test_resume_keeps_cycles_and_completes_the_open_window(store):
    _, _, units, bench, w = _setup(store, window=10)
    w.add(actuations=actuations([0, 1], range(15)), edges=edges([0, 1], 10))
    w.flush()
    run_id = w.run_id
    w.close("stopped")
    assert store.run(run_id).cycles_done == 15
    w2 = store.resume_run(run_id)
    # the sampler restarts: the analysis counts from 0 again and times restart near 0
    w2.add(actuations=actuations([0, 1], range(10)), edges=edges([0, 1], 10))
    w2.close("target")
    got = store.actuations(units=[units[0]], kind="make")
    assert list(got["cycle"]) == list(range(25))
    assert np.all(np.diff(got["t_start_ns"]) > 0)  # run time stays monotonic across the resume
    tr = store.trend(units[0], "bounce_us")
    assert list(tr.cycle_lo) == [0, 10, 20] and list(tr.count) == [10, 10, 5]
    run = store.run(run_id)
    assert run.cycles_done == 25 and run.segments == 2 and run.end_reason == "target"
    assert np.all(np.diff(store.edges(units[0]).t_ns) >= 0)
    with pytest.raises(StoreError, match="complete"):
        store.resume_run(run_id)


def test_second_recorder_on_a_bench_is_refused(open_store):
    a, b = open_store(), open_store()
    _, _, units, bench, w = _setup(a)
    with pytest.raises(StoreBusyError, match="being recorded"):
        b.acquire_bench(bench)
    # a lease from a process of this host that no longer exists is taken over at once
    with a.engine.begin() as c:
        c.execute(update(sch.Bench).values(lease_pid=2**22 + 12345))
    token = b.acquire_bench(bench)
    with pytest.raises(StoreBusyError, match="lost the lease"):
        w.add(actuations=actuations([0], range(2)))
        w.flush()
    w.abandon()
    assert len(a.actuations()) == 0  # the refused flush wrote nothing
    b.release_bench(bench, token)


def test_break_and_make_percentiles_are_kept_apart(store):
    _, _, units, _, w = _setup(store, n_units=1, window=5)
    a = actuations([0], range(5))
    a["bounce_us"] = np.where(a["kind"] == BREAK, 1000.0, 10.0)
    w.add(actuations=a)
    w.close("stopped")
    assert store.trend(units[0], "bounce_us", kind="break").max[0] == 1000.0
    assert store.trend(units[0], "bounce_us", kind="make").max[0] == 10.0
    with store.engine.connect() as c:
        assert c.execute(text("SELECT count(*) FROM rollups")).scalar() == 2 * len(ROLLUP_METRICS)


def test_large_batch_round_trip(store):
    # SQLite takes each unit's rows in pieces of PIPE_CHUNK, as statements of ROWS_PER_INSERT rows
    # and the rest one at a time (5,200 rows a unit: a piece of 4,096 and one of 1,104, 16 of them
    # left over): every value of every column comes back where it was
    part = store.register_part("AG-R12")
    lot = store.register_lot(part, "B")
    units = {ch: store.register_unit(lot, f"B{ch}") for ch in range(8)}
    w = store.start_run(store.register_bench("bench L"), units, profile={}, rollup_window=100)
    a = actuations(range(8), range(2600))
    w.add(actuations=a)
    w.close("stopped")
    got = store.actuations()
    assert len(got) == len(a)
    for ch, unit in units.items():
        mine = got[got["unit_id"] == unit]
        src = a[a["channel"] == ch]
        src = src[np.lexsort((src["kind"], src["cycle"]))]
        for name in a.dtype.names:
            np.testing.assert_array_equal(mine[name], src[name], err_msg=name)
        assert len(store.trend(unit, "bounce_us")) == 26
