"""Debounce designer: recorded bounce -> a firmware debounce setting, or R and C before a Schmitt input.

```python
from benchlog.design import channel_record, design_software, design_rc, Circuit, load_thresholds

rec = channel_record(edges.t_ns[m], edges.level[m], actuations, channel=0, quiet_ns=10_000_000)
soft = design_software([rec], ts_ns=1_000_000, target_rate=1e-6)    # sweeps, choices, life windows
th = find_input(load_thresholds(), "CMOS Schmitt inverter, 5 V")
hard = design_rc([rec], Circuit(5.0, 0.05, (9_500.0, 10_500.0), 0.05, 0.10, th))
png = plot_latency(soft.sweeps)
```

Everything works on arrays of one channel's edges (`t_ns`, `level`, 1 = closed) and its actuation rows
(ACTUATION_DTYPE); the engine knows nothing of the store or the wire. See docs/debounce.md.
"""

from benchlog.design._actuations import (
    BounceFigures,
    ChannelRecord,
    bounce_figures,
    channel_record,
    group_edges,
)
from benchlog.design._debouncers import KINDS, compose_clips, confirm, integrator, lockout, replay, stable
from benchlog.design._eseries import E12, E24, format_si, preferred_values
from benchlog.design._hardware import Circuit, RCCheck, RCDesign, check_rc, design_rc, screened, series_limit
from benchlog.design._plots import plot_latency, plot_node_voltage, plot_tradeoff
from benchlog.design._pullup import Meter, PullupEstimate, estimate_pullup
from benchlog.design._rc import InputChanges, Networks, affine_scan, node_at_edges, node_curve, schmitt
from benchlog.design._runs import SampledRuns, sample_runs
from benchlog.design._score import Score, Windows, score
from benchlog.design._software import Choice, LifeRow, SoftwareDesign, SweepPoint, design_software
from benchlog.design._tail import Tail, fit_tail, gpd_pwm, zero_event_bound
from benchlog.design._thresholds import InputThresholds, find_input, load_thresholds, parse_thresholds

__all__ = [
    "BounceFigures",
    "ChannelRecord",
    "Choice",
    "Circuit",
    "E12",
    "E24",
    "InputChanges",
    "InputThresholds",
    "KINDS",
    "LifeRow",
    "Meter",
    "Networks",
    "PullupEstimate",
    "RCCheck",
    "RCDesign",
    "SampledRuns",
    "Score",
    "SoftwareDesign",
    "SweepPoint",
    "Tail",
    "Windows",
    "affine_scan",
    "bounce_figures",
    "channel_record",
    "check_rc",
    "compose_clips",
    "confirm",
    "design_rc",
    "design_software",
    "estimate_pullup",
    "find_input",
    "fit_tail",
    "format_si",
    "gpd_pwm",
    "group_edges",
    "integrator",
    "load_thresholds",
    "lockout",
    "node_at_edges",
    "node_curve",
    "parse_thresholds",
    "plot_latency",
    "plot_node_voltage",
    "plot_tradeoff",
    "preferred_values",
    "replay",
    "sample_runs",
    "schmitt",
    "score",
    "screened",
    "series_limit",
    "stable",
    "zero_event_bound",
]
