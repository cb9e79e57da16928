"""The capture plots (`benchlog scope --plot` and the PNG): everything the measurement used is drawn and
named in the legend: both levels of the voltage definition, the derived edges, the bounce region, and,
with an input, its VT+ / VT- and the RC node voltage in front of it."""

from __future__ import annotations

import numpy as np
import pytest

from benchlog.analog import capture_figure, chart_data, fraction_levels, measure_capture, rc_node, text_chart
from benchlog.analysis import AnalysisSettings
from tests.analog._traces import piecewise

V_OPEN = 12.0
INPUT = (2.9, 1.85)  # VT+ and VT- of the input the node drives (values of the test, not of a part)


@pytest.fixture(scope="module")
def measured():
    # a make at 1 ms with two reopenings (at 1.2 ms and 1.5 ms), then closed: 4 derived edges
    ramp = 100.0
    points = [(0.0, V_OPEN), (1e6, V_OPEN), (1e6 + ramp, 0.0)]
    for a in (1.2e6, 1.5e6):
        points += [(a, 0.0), (a + ramp, V_OPEN), (a + 50_000, V_OPEN), (a + 50_000 + ramp, 0.0)]
    points += [(6e6, 0.0)]
    cap = piecewise(points, 1000.0, 6e6)
    levels = fraction_levels(V_OPEN)
    m = measure_capture(cap, 0, levels, AnalysisSettings(settle_ns=2_000_000))
    return cap, levels, m


def test_the_chart_holds_levels_edges_bounce_and_the_rc_node(measured):
    cap, levels, m = measured
    assert len(m.edges) == 5 and len(m.actuations) == 1
    tau = 0.4e-3
    data = chart_data(cap, cap.volts[0], m, tau_s=tau, input_levels=INPUT, rc_label="10 kohm, 40 nF")
    assert (data.open_above, data.closed_below) == (levels.open_above, levels.closed_below)
    a = m.actuations[0]
    assert data.bounce_ms == [(a["t_first_ns"] / 1e6, a["t_settle_ns"] / 1e6)]
    assert np.allclose(data.edge_t_ms, (m.edges.t_s - cap.t0_s) * 1e3)
    # the node drawn is the capture through the first-order network (rc_node, checked against the
    # analytic solution and scipy.signal in test_rc.py), over the charted stretch
    k0 = int(round(data.t_ms[0] * 1e-3 / cap.dt_s))
    node = rc_node(cap.volts[0][k0 : k0 + len(data.node_v)], cap.dt_s, np.array([tau]))[0]
    assert np.allclose(data.node_v, node)

    fig = capture_figure(data)
    ax = fig.axes[0]
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert legend == [
        "bounce: first touch to settled",
        "contact V",
        "RC node (10 kohm, 40 nF)",
        f"open above {levels.open_above:.3g} V",
        f"closed below {levels.closed_below:.3g} V",
        "input VT+ 2.9 V",
        "input VT- 1.85 V",
        "derived edges",
    ]
    by_label = {line.get_label(): line for line in ax.get_lines()}
    for label, y in (
        (legend[3], levels.open_above),
        (legend[4], levels.closed_below),
        (legend[5], INPUT[0]),
        (legend[6], INPUT[1]),
    ):
        assert np.allclose(by_label[label].get_ydata(), y)
    assert np.allclose(by_label["derived edges"].get_xdata(), data.edge_t_ms)
    (band,) = ax.patches  # the shaded bounce, one actuation
    assert np.isclose(band.get_x(), data.bounce_ms[0][0])
    assert np.isclose(band.get_x() + band.get_width(), data.bounce_ms[0][1])
    import matplotlib.pyplot as plt  # after capture_figure chose its backend (Agg)

    plt.close(fig)

    text = text_chart(data, width=120, height=30)
    for word in ("open above 10.8 V", "closed below 1.2 V", "input VT+ 2.9 V", "input VT- 1.85 V", "bounce"):
        assert word in text
    key = text.rstrip().splitlines()[-1]
    assert key.startswith("  key:")
    for word in ("contact V", "RC node (10 kohm, 40 nF)", "derived edges", "bounce: first touch to settled"):
        assert word in key


def test_without_an_input_the_chart_names_what_it_has(measured):
    cap, _, m = measured
    data = chart_data(cap, cap.volts[0], m)
    assert set(data.labels()) == {"trace", "open", "closed", "edges", "bounce"}
    text = text_chart(data, width=100, height=24)
    assert "input VT" not in text and "RC node" not in text and "open above" in text
