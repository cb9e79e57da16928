"""`benchlog record FILE`: a capture file goes into the store as a port would, checked against the
simulator's ground truth (every edge it sent, every make and break it made)."""

from __future__ import annotations

import numpy as np
import pytest

from benchlog.sim import Bench, load_preset
from benchlog.store import Store
from benchlog.views.cli import main
from benchlog.wire import Go, Plan

S = 1_000_000_000
SECONDS = 4


def capture(tmp_path, form: str, seconds: float = SECONDS):
    """What a logger saved from a sampler cycling 50 ms on / 50 ms off (both wire forms)."""
    cfg = load_preset("demo").with_sampler(form=form)
    bench = Bench(cfg, 5)
    recs = bench.advance_to(0)
    for ch in bench.units:
        recs += bench.command(Plan(ch, 50_000, 50_000, 0))
    recs += bench.command(Go())
    data = bench.encode(recs)
    t = 0
    while t < seconds * S:
        t += S // 4
        data += bench.encode(bench.advance_to(t))
    path = tmp_path / f"night-{form}.cap"
    path.write_bytes(data)
    return bench, path


@pytest.mark.parametrize("form", ["line", "packed"])
def test_a_capture_file_is_recorded_like_a_port(tmp_path, capsys, form):
    bench, path = capture(tmp_path, form)
    db = str(tmp_path / "lab.sqlite")
    chans = sorted(bench.units)
    units = [f"{ch}=AG-MS5/L1/AG-{ch:03d}" for ch in chans]
    code = main(
        [
            "record",
            str(path),
            "--bench",
            "logger",
            "--profile",
            "50:50:0",
            "--db",
            db,
            "--quiet",
            "--units",
            *units,
        ]
    )
    assert code == 0
    assert "ended" in capsys.readouterr().out
    store = Store.open(db, readonly=True)
    try:
        (run,) = store.runs()
        assert run.end_reason == "stopped" and run.board_id  # the announcement, as recorded
        sent = bench.truth.sent
        truth = bench.truth.actuations
        truth = truth[truth["t_drive_ns"] < SECONDS * S]  # planned but never sent
        for ru in store.run_units(run.id):
            # every edge the sampler sent on the channel is stored
            assert len(store.edges(ru.unit.id)) == int((sent["channel"] == ru.channel).sum())
            acts = store.actuations(units=[ru.unit.id])
            t = truth[truth["channel"] == ru.channel]
            # one make and one break per drive the capture holds (the recorded drive records anchor them)
            for kind in (0, 1):
                assert int((acts["kind"] == kind).sum()) == int((t["kind"] == kind).sum())
            done = acts[(acts["kind"] == 0) & np.isfinite(acts["bounce_us"])]
            want = t[(t["kind"] == 0)]["bounce_us"]
            # bounce measured from the recorded edges, against the simulator's true bounce (p95)
            assert np.percentile(done["bounce_us"], 95) == pytest.approx(np.percentile(want, 95), abs=3.0)
        assert store.summaries(runs=[run.id])["make.bounce_us"].count.sum() > 0
    finally:
        store.close()
