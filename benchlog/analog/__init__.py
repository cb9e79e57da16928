"""Analog captures: scope and ADC traces read, edges derived by the voltage definitions, then measured.

```python
from benchlog.analog import read_capture, open_circuit_level, fraction_levels, measure_capture

cap = read_capture("make.csv")                       # CSV, .npz or WAV
v_open = open_circuit_level(cap.volts[0])
m = measure_capture(cap, 0, fraction_levels(v_open), AnalysisSettings(settle_ns=5_000_000))
m.actuations                                         # ACTUATION_DTYPE rows, as the digital path gives
```
This stage sits beside the digital edge path: it imports the analysis and design stages and the
simulator's physics (for rendering test and demo traces), never the store or the views. See
docs/analog.md.
"""

from benchlog.analog._capture import Capture, read_capture, read_csv, read_npz, read_wav
from benchlog.analog._demo import make_demo
from benchlog.analog._edges import (
    CLOSED_FRACTION,
    MIL_MIN_NS,
    MIL_OPEN_FRACTION,
    Edges,
    Levels,
    check_rate,
    derive_edges,
    drive_edges,
    fraction_levels,
    open_circuit_level,
)
from benchlog.analog._measure import Measured, analyse_edges, measure_capture, run_ns
from benchlog.analog._plots import ChartData, capture_figure, chart_data, plot_capture, text_chart
from benchlog.analog._rc import (
    Corner,
    Score,
    WaveformDesign,
    corners,
    design_from_waveform,
    rc_node,
    score,
    windows,
)
from benchlog.analog._render import render_contact
from benchlog.analog._report import ScopeOptions, ScopeResult, scope_capture
from benchlog.analog._sampler import Comparison, DigitalInput, compare, sampled_edges

__all__ = [
    "ChartData",
    "capture_figure",
    "ScopeOptions",
    "ScopeResult",
    "chart_data",
    "make_demo",
    "plot_capture",
    "scope_capture",
    "text_chart",
    "CLOSED_FRACTION",
    "Capture",
    "Comparison",
    "Corner",
    "DigitalInput",
    "Score",
    "WaveformDesign",
    "compare",
    "corners",
    "design_from_waveform",
    "rc_node",
    "sampled_edges",
    "score",
    "windows",
    "Edges",
    "Levels",
    "MIL_MIN_NS",
    "MIL_OPEN_FRACTION",
    "Measured",
    "analyse_edges",
    "check_rate",
    "derive_edges",
    "drive_edges",
    "fraction_levels",
    "measure_capture",
    "open_circuit_level",
    "read_capture",
    "read_csv",
    "read_npz",
    "read_wav",
    "render_contact",
    "run_ns",
]
