"""`benchlog analyze` streams a capture: read, decoded, timed and measured in batches, its actuations
summarised as they come and dropped. The measurements must not depend on the read or batch sizes, and the
streamed summaries must equal numpy's percentiles over all the values (numpy.percentile as the reference
implementation of the linear-interpolation percentile, Hyndman and Fan's definition 7)."""

from __future__ import annotations

import numpy as np
import pytest

from benchlog.analysis import Summaries, load_spec, summarize
from benchlog.analysis._summary import COMPACT_AT, ValueCounts
from benchlog.sim import load_preset
from benchlog.views.cli.cmd_analyze import analyze_file
from tests.clock.test_clock_replay import recording

S = 1_000_000_000


def capture(tmp_path, cfg, seconds: float):
    path = tmp_path / "capture.bin"
    path.write_bytes(recording(cfg, seconds, seed=8))
    return path


def analysed(path, spec, read_bytes, batch_edges):
    rows: list[np.ndarray] = []
    settings = spec.settings()
    doc = analyze_file(
        str(path), settings, spec, read_bytes=read_bytes, batch_edges=batch_edges, rows=rows.append
    )
    table = np.concatenate(rows)
    return doc, table[np.lexsort((table["channel"], table["t_start_ns"]))]


@pytest.mark.parametrize(
    "cfg",
    [
        load_preset("demo").with_sampler(form="packed"),
        load_preset("demo").with_faults(reset_at_cycle=15, flip_rate=1e-4),
    ],
    ids=["packed", "line, reset and flipped bits"],
)
def test_read_and_batch_sizes_change_no_measurement(tmp_path, cfg):
    path = capture(tmp_path, cfg, 4.0)
    spec = load_spec("AG-MS5")
    big_doc, big = analysed(path, spec, 1 << 22, 1 << 22)
    assert len(big) > 1000
    for read, batch in ((4_099, 500), (65_537, 1), (1 << 20, 1 << 18)):
        doc, rows = analysed(path, spec, read, batch)
        assert rows.tobytes() == big.tobytes()  # every field of every actuation, NaNs included
        assert doc == big_doc
        # with no rows asked for, the analyzer hands them over unsorted: the summaries are the same
        assert analyze_file(str(path), spec.settings(), spec, read_bytes=read, batch_edges=batch) == doc
    # the streamed summaries are those of the whole table
    assert big_doc["channels"] == summarize(big, spec)


@pytest.mark.parametrize("longest", [300, 60_000], ids=["never folded", "folded"])
def test_value_counts_percentiles_are_numpys(longest):
    # a short recording's values are all kept until the end; a long one's are folded into distinct
    # values and counts as they come (COMPACT_AT): both give numpy's percentiles
    rng = np.random.default_rng(0)
    for trial in range(400 if longest < COMPACT_AT else 40):
        n = int(rng.integers(1, longest))
        pool = rng.normal(0, 1000, int(rng.integers(1, 40))) if trial % 2 else np.arange(25.0)
        values = rng.choice(pool, n)
        values[rng.random(n) < 0.1] = np.nan
        vc = ValueCounts()
        for part in np.array_split(values, int(rng.integers(1, 6))):
            vc.add(part)
        finite = values[~np.isnan(values)]
        assert len(vc) == len(finite)
        for q in (0, 50, 95, 99.9, 100, float(rng.uniform(0, 100))):
            if len(finite):
                assert vc.percentile(q) == np.percentile(finite, q)  # numpy as the reference, exactly
        if len(finite):
            p50, p95 = np.percentile(finite, [50, 95])
            assert vc.dist() == {"n": len(finite), "p50": p50, "p95": p95, "max": finite.max()}


def test_summaries_in_pieces_equal_the_whole(tmp_path):
    path = capture(tmp_path, load_preset("demo").with_sampler(form="packed"), 3.0)
    _, table = analysed(path, load_spec("AG-MS5"), 1 << 20, 1 << 18)
    for spec in (None, load_spec("VS-505")):
        pieces = Summaries(spec)
        for part in np.array_split(table, 7):
            pieces.add(part)
        assert pieces.result() == summarize(table, spec)
