"""The report's figures: the requirement is always inside the axes and drawn, stacked suspensions are
counted, and a distribution's axis shows the limit and the upper tail."""

import io

import numpy as np
from matplotlib.image import imread

from benchlog.stats import LifeTable, UnitSample, fit_weibull
from benchlog.views.report._plots import ecdf_png, suspension_marks, trend_png, weibull_png

LIMIT_RED = np.array([0xB2, 0x22, 0x22]) / 255  # the colour the limit line is drawn in


def _red_columns(png: bytes) -> np.ndarray:
    """Pixel columns holding the limit line's colour (so: where it is drawn)."""
    img = imread(io.BytesIO(png))[..., :3]
    hit = np.all(np.abs(img - LIMIT_RED) < 0.2, axis=-1)  # anti-aliased edges blend with white
    return np.flatnonzero(hit.sum(axis=0) >= 40)  # a vertical line, not a legend swatch


def _short_test() -> list:
    # the case: a short test (3,000 cycles) judged against a 100,000-cycle life
    rows = [("AG-1", 1_096, True, "chatter")] + [(f"AG-{i}", 3_000, False, "") for i in range(2, 9)]
    ag = LifeTable.of(rows)
    rows = [("VS-1", 687, True, "welded"), ("VS-2", 2_104, True, "chatter"), ("VS-3", 2_316, True, "welded")]
    vs = LifeTable.of(rows + [(f"VS-{i}", 3_000, False, "") for i in range(4, 9)])
    return [("AG-MS5:L1", ag, None), ("VS-505:L1", vs, fit_weibull(vs))]


def test_weibull_plot_always_shows_the_requirement_with_the_data():
    tables = _short_test()
    plot = weibull_png(tables, 100_000, 10)
    lo, hi = plot.x_range
    assert lo < 687 and 100_000 < hi  # every unit and the required life inside the axis
    assert plot.requirement == 100_000
    cols = _red_columns(plot.png)
    assert len(cols) and cols.max() < imread(io.BytesIO(plot.png)).shape[1] * 0.95  # drawn, inside
    # a long test whose units outlive the requirement: still both in view
    long_life = LifeTable.of([(f"U{i}", 400_000 + 1000 * i, i < 3, "worn") for i in range(8)])
    lo, hi = weibull_png([("x", long_life, None)], 100_000, 10).x_range
    assert lo < 100_000 and 407_000 < hi


def test_stacked_suspensions_are_counted():
    ag = _short_test()[0][1]
    assert suspension_marks(ag.cycles[~ag.failed]) == [(3000.0, 7)]
    assert suspension_marks(np.array([5.0, 7.0, 5.0])) == [(5.0, 2), (7.0, 1)]


def test_distribution_axis_shows_the_limit_and_the_upper_tail():
    rng = np.random.default_rng(0)
    values = rng.lognormal(np.log(1500), 0.3, 4000)  # bounce times in us, around 1.5 ms
    values[:3] = 18_000  # three far outliers must not squeeze the tail near the 3 ms limit
    sample = UnitSample.of(values, np.repeat(np.arange(8), 500))
    plot = ecdf_png("make_bounce", [("VS-505:L1", sample)], 3000, 95)
    lo, hi = plot.x_range
    assert lo <= 0 and 3.0 < hi < 6.0  # ms: past the limit, not out to the 18 ms outliers
    assert np.percentile(values, 99.9) / 1e3 < hi  # the upper tail is in view
    assert plot.requirement == 3.0 and len(_red_columns(plot.png)) > 0


def test_a_trend_with_too_few_windows_is_drawn_as_a_note_not_an_empty_legend():
    # a short run (the demo at 200 cycles) has one window per unit: `report` failed with matplotlib's
    # "no artists with labels" warning (an error in the suite, and an empty legend box for a user)
    one = (np.array([100]), np.array([0.0004]))
    plot = trend_png("make_bounce", [("N01", 0, *one), ("N02", 1, *one)], ["AG-MS5", "VS-505"], None, 95)
    assert imread(io.BytesIO(plot.png)).shape[0] > 100
