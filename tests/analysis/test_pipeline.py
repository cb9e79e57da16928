"""Simulated sampler -> wire bytes -> Decoder -> Timeline -> Analyzer, against the simulator's truth.

The simulator (benchlog.sim) records what each contact really did (first touch, settle, bounce count);
these tests check the analysis recovers it through the real byte path, across counter wraps, resets and
lost data.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchlog.analysis import INCOMPLETE, MAKE, MISSED, NO_CHANGE, AnalysisSettings, Analyzer, measure
from benchlog.clock import Timeline
from benchlog.events import RESET, SEQUENCE_GAP
from benchlog.sim import Bench, load_preset
from benchlog.wire import Announce, Decoder, Drive, Edges, Go, LineEncoder, Plan

MS = 1_000_000
S = 1_000_000_000
SETTINGS = AnalysisSettings(settle_ns=5 * MS, resolution_ns=1000)


def run_bench(config, seconds: float, seed: int = 3, chunk: int = 65536, cut: slice | None = None):
    bench = Bench(config, seed)
    recs = bench.advance_to(0)
    for ch in bench.units:
        recs += bench.command(Plan(ch, 50_000, 50_000, 0))
    recs += bench.command(Go())
    data = bytearray(bench.encode(recs))
    t = 0
    while t < seconds * S:
        t += S // 4
        data += bench.encode(bench.advance_to(t))
    if cut is not None:
        del data[cut]
    dec, tl, an = Decoder(), Timeline(), Analyzer(SETTINGS)
    out, incidents = [], []
    for i in range(0, len(data), chunk):
        timed = tl.push(dec.feed(bytes(data[i : i + chunk])), host_ns=i * 10_000)
        incidents += timed.incidents
        out.append(an.push(timed.edges, timed.drives, timed.incidents))
    out.append(an.flush())
    return bench, np.concatenate(out), incidents


def _key(a):
    return a["channel"].astype(np.int64) * 10**9 + a["cycle"] * 2 + a["kind"]


def matched(rows, truth):
    """Rows and truth rows of the same (channel, cycle, kind), both sorted."""
    rk, tk = _key(rows), _key(truth)
    common = np.intersect1d(rk, tk)
    r = rows[np.isin(rk, common)]
    t = truth[np.isin(tk, common)]
    return r[np.argsort(_key(r))], t[np.argsort(_key(t))]


def check_against_truth(rows, truth, tol_us=2.5):
    # the simulator plans cycles ahead of what it has sent: compare with the ones that were sent
    truth = truth[truth["t_drive_ns"] <= rows["t_start_ns"].max() + 10 * MS]
    ok = (rows["flags"] & INCOMPLETE) == 0
    r, t = matched(rows[ok], truth)
    assert len(r) > 0.9 * len(truth)
    # sampler ticks are 1 us and the sampler clock runs ppm off true time: a couple of us
    np.testing.assert_allclose(r["bounce_us"], t["bounce_us"], atol=tol_us)
    np.testing.assert_allclose(r["transit_us"], t["transit_us"], atol=tol_us)
    np.testing.assert_array_equal(r["bounce_count"], t["bounce_count"])


def test_population_bounce_recovered_actuation_by_actuation():
    bench, rows, _ = run_bench(load_preset("demo"), 6.0)
    truth = bench.truth.actuations
    check_against_truth(rows, truth)
    # and the distributions: operate time medians against the populations' configured medians
    for name, chans in (("AG-MS5", range(0, 8)), ("VS-505", range(8, 16))):
        pop = bench.config.populations[name]
        sel = (
            np.isin(rows["channel"], list(chans))
            & (rows["kind"] == MAKE)
            & ((rows["flags"] & INCOMPLETE) == 0)
        )
        med = float(np.median(rows["transit_us"][sel]))
        assert abs(med / pop.operate.median_us - 1) < 0.05, (name, med)


def test_sixteen_bit_counter_wraps_every_65_ms():
    bench, rows, _ = run_bench(load_preset("wrap16"), 4.0)
    check_against_truth(rows, bench.truth.actuations)


def test_packed_form_in_small_chunks():
    cfg = load_preset("demo").with_sampler(form="packed")
    bench, rows, _ = run_bench(cfg, 3.0, chunk=777)
    check_against_truth(rows, bench.truth.actuations)


def test_sampler_reset_marks_its_actuations_incomplete():
    cfg = load_preset("demo").with_faults(reset_at_cycle=20)
    bench, rows, incidents = run_bench(cfg, 4.0)
    resets = [i for i in incidents if i.kind == RESET]
    assert resets, "the timeline reports the reset"
    r = resets[0]
    over = (rows["t_start_ns"] <= r.t_end_ns) & (rows["t_end_ns"] > r.t_start_ns)
    assert over.any() and np.all(rows["flags"][over] & INCOMPLETE)
    before = rows[rows["t_end_ns"] <= r.t_start_ns]
    check_against_truth(before, bench.truth.actuations[bench.truth.actuations["cycle"] < 19])


def _replayed_through_a_power_cut(cut_ms: float, chunk: int, form: str = "line"):
    """Two channels cycling; the board loses power for 20 ms at `cut_ms` and comes back reset; the
    host plans again (as the recorder does) and the bytes, received as the sampler sent them (host time
    = sampler time), go in `chunk`-byte pieces through the analysis alone, as `benchlog analyze` reads
    a capture (no recorder to help)."""
    bench = Bench(load_preset("demo").with_sampler(form=form), 3)
    recs = bench.advance_to(0)
    for ch in (0, 1):
        recs += bench.command(Plan(ch, 50_000, 50_000, 0))
    sent = [(bench.now_ns, bench.encode(recs + bench.command(Go())))]
    for t in (*range(S // 4, int(cut_ms * MS), S // 4), int(cut_ms * MS)):
        sent.append((t, bench.encode(bench.advance_to(t))))
    recs = bench.power_cycle(20 * MS)
    for ch in (0, 1):
        recs += bench.command(Plan(ch, 50_000, 50_000, 0))
    sent.append((bench.now_ns, bench.encode(recs + bench.command(Go()))))
    for t in range(bench.now_ns + S // 4, bench.now_ns + 2 * S, S // 4):
        sent.append((t, bench.encode(bench.advance_to(t))))
    dec, tl, an = Decoder(), Timeline(), Analyzer(SETTINGS)
    out, incidents = [], []
    for host_ns, data in sent:
        for i in range(0, len(data), chunk):
            timed = tl.push(dec.feed(data[i : i + chunk]), host_ns=host_ns)
            incidents += timed.incidents
            out.append(an.push(timed.edges, timed.drives, timed.incidents))
    out.append(an.flush())
    (reset,) = [i for i in incidents if i.kind == RESET]
    return bench, np.concatenate(out), reset


@pytest.mark.parametrize("cut_ms", [1_030.0, 1_052.0, 1_075.0], ids=["closed", "releasing", "open"])
def test_after_a_power_cut_the_next_plan_is_measured_from_the_contact_as_it_is(cut_ms):
    """A power cut opens every closed contact (its coil goes off with it) while the sampler is blind.
    The cycle it cut is not measured; every cycle after the reset is, as the simulator made it, however
    the bytes were chunked (cycle 11 switches on at 1,000.1 ms; the contacts make about 6 ms later and
    release about 4 ms after the switch-off at 1,050.1 ms)."""
    whole = None
    for chunk in (65536, 777):
        bench, rows, reset = _replayed_through_a_power_cut(cut_ms, chunk)
        cut = rows[(rows["t_start_ns"] <= reset.t_end_ns) & (rows["t_end_ns"] > reset.t_start_ns)]
        assert len(cut) and np.all(cut["flags"] & INCOMPLETE) and set(cut["cycle"].tolist()) == {10}
        after = rows[rows["t_start_ns"] > reset.t_end_ns]
        after = after[after["t_end_ns"] < after["t_end_ns"].max()]  # not the ones the end of data cut
        assert len(after) >= 2 * 2 * 15 and not np.any(after["flags"] & (INCOMPLETE | MISSED | NO_CHANGE))
        assert after["cycle"].min() == 11  # the first cycle planned again: its make measured
        truth = bench.truth.actuations
        check_against_truth(after, truth[truth["cycle"] >= 11])
        assert len(rows) == len(np.unique(_key(rows)))  # one make and one break per cycle
        if whole is None:
            whole = rows
        else:  # the bytes' chunking changes nothing outside the cut cycle
            a, b = rows[rows["cycle"] != 10], whole[whole["cycle"] != 10]
            for name in a.dtype.names:
                np.testing.assert_array_equal(a[name], b[name], err_msg=name)


def test_lost_frames_mark_the_gap_incomplete_and_nothing_else():
    cfg = load_preset("demo").with_sampler(form="packed")
    bench, rows, incidents = run_bench(cfg, 3.0, cut=slice(20_000, 21_000))
    gaps = [i for i in incidents if i.kind == SEQUENCE_GAP]
    assert gaps
    bad = (rows["flags"] & INCOMPLETE) != 0
    hit = np.zeros(len(rows), bool)
    for inc in incidents:  # the gap, and the beats' lost-edge count over the beat interval around it
        hit |= (rows["t_start_ns"] <= inc.t_end_ns) & (rows["t_end_ns"] > inc.t_start_ns)
    end = rows["t_end_ns"] >= rows["t_end_ns"].max()  # cut short by the end of data
    np.testing.assert_array_equal(bad & ~end, hit & ~end)
    assert 0 < bad.sum() < 0.6 * len(rows)
    # drives were lost, so cycle numbers after the gap run behind: match on the 50 ms drive grid instead
    truth = bench.truth.actuations.copy()
    truth["cycle"] = np.round(truth["t_drive_ns"] / (50 * MS))
    good = rows[~bad].copy()
    good["cycle"] = np.round(good["t_start_ns"] / (50 * MS))
    r, t = matched(good, truth)
    assert len(r) == len(good)
    # outside the gap every complete actuation matches the truth
    np.testing.assert_allclose(r["bounce_us"], t["bounce_us"], atol=2.5)


@settings(max_examples=8, deadline=None)
@given(st.integers(0, 2**16 - 1))
def test_counter_wrap_placed_anywhere(start_tick):
    """The same contact history sent with a 16-bit counter starting at any value measures the same."""
    us = 1_000
    hist = []  # (t_us, kind, channel, level)
    for c in range(12):
        t0 = c * 40_000
        hist += [(t0, "D", 0, 1), (t0 + 5000, "E", 0, 1), (t0 + 5150, "E", 0, 0), (t0 + 5400, "E", 0, 1)]
        hist += [(t0 + 20_000, "D", 0, 0), (t0 + 23_000, "E", 0, 0), (t0 + 23_070, "E", 0, 1)]
        hist += [(t0 + 23_300, "E", 0, 0)]
    enc = LineEncoder(tick_digits=4, counter_bits=16)
    data = enc.encode(Announce(1, 1_000_000, 16, 8, "WRAPTEST"))
    from benchlog.wire import Beat

    last_beat = None
    for t_us, kind, ch, lv in hist:
        tick = (start_tick + t_us) % 2**16
        if last_beat is None or t_us - last_beat > 10_000:  # beats well inside a quarter wrap
            data += enc.encode(Beat(tick, 0, 0))
            last_beat = t_us
        rec = Drive(ch, lv, tick) if kind == "D" else Edges.of([(ch, lv, tick)])
        data += enc.encode(rec)
    timed = Timeline().push(Decoder().feed(data), host_ns=10**9)
    rows = measure(timed.edges, timed.drives, timed.incidents, settings=SETTINGS)
    direct = measure(
        *_direct(hist, us),
        settings=SETTINGS,
    )
    for name in ("transit_us", "bounce_us", "bounce_count", "longest_gap_us", "kind", "cycle"):
        np.testing.assert_array_equal(rows[name][:-1], direct[name][:-1], err_msg=name)


def _direct(hist, us):
    from benchlog.events import TimedDrives, TimedEdges

    e = [(t * us, ch, lv) for t, k, ch, lv in hist if k == "E"]
    d = [(t * us, ch, lv) for t, k, ch, lv in hist if k == "D"]
    return TimedEdges.of(e), TimedDrives.of(d)
