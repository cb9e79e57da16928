"""The terminal charts: where things land on the character grid."""

from __future__ import annotations

import numpy as np

from benchlog.views.tui._plots import Level, Series, histogram, trend_chart


def test_trend_chart_places_series_and_limit_rows():
    x = np.array([0.0, 50.0, 100.0])
    y = np.array([1000.0, 2000.0, 3000.0])
    text = trend_chart([Series("p95", x, y, "+", "")], [Level("limit", 4000.0, "=", "")], None, 47, 12)
    rows = text.plain.splitlines()
    plot = [r[7:] for r in rows[:10]]  # 10 plot rows after the 7-character axis labels
    assert len(plot[0]) == 40
    # y runs 0 .. 4000 * 1.05 over 10 rows: row of a value v is 9 - round(v / 4200 * 9)
    for xv, yv, col in ((0, 1000.0, 0), (50, 2000.0, 20), (100, 3000.0, 39)):
        row = 9 - round(yv / 4200 * 9)
        assert plot[row][col] == "+", (xv, yv)
    limit_row = 9 - round(4000 / 4200 * 9)
    assert set(plot[limit_row]) == {"="}
    assert rows[-1].split()[:3] == ["0", "50", "100"]


def test_histogram_peak_matches_numpy():
    rng = np.random.default_rng(3)
    v = rng.gamma(2.0, 400.0, 5000)
    width, height = 67, 10
    text = histogram(v, width, height, limit=3000.0)
    bins = width - 7
    top = max(v.max(), 3000.0) * 1.02
    counts, _ = np.histogram(v, bins=bins, range=(0.0, top))  # reference: numpy.histogram
    assert text.plain.splitlines()[0].split()[0] == str(counts.max())
    bottom = text.plain.splitlines()[height - 3][7:]
    over = np.arange(bins) * top / bins >= 3000.0
    for b in range(bins):
        if counts[b]:
            assert bottom[b] == ("#" if over[b] else ("█" if counts[b] / counts.max() * 8 >= 0.5 else "▁"))
        else:
            assert bottom[b] == " "
