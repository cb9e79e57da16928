"""Actuation analysis: edges -> measured makes and breaks -> spec verdicts -> drift flags.

```python
from benchlog.analysis import AnalysisSettings, Analyzer, measure, load_spec, judge, unit_verdict

rows = measure(edges, drives, settings=AnalysisSettings(settle_ns=5_000_000))   # ACTUATION_DTYPE
spec = load_spec("AG-MS5.toml")
judge(rows, spec)
verdict, reason = unit_verdict(rows[rows["channel"] == 0], spec)
```
Definitions of every metric: docs/metrics.md; the spec file format: docs/spec.md.
"""

from benchlog.analysis._analyzer import Analyzer, AnalyzerCounters, blank_incomplete, measure, power_off_ns
from benchlog.analysis._settings import DEFAULT_CHATTER_THRESHOLD_NS, AnalysisSettings, load_settings
from benchlog.analysis._summary import Summaries, summarize
from benchlog.analysis._types import (
    ACTUATION_DTYPE,
    BREAK,
    CHATTER,
    FAIL,
    FREE,
    FREE_RUNNING,
    GLITCHY,
    INCOMPLETE,
    MAKE,
    MARGINAL,
    MISSED,
    NO_CHANGE,
    NO_VERDICT,
    PASS,
    STUCK,
    empty_actuations,
)

Segmenter = Analyzer  # the same object: it segments and measures in one pass

# names of the spec and drift modules load on first use: a command that only measures (`analyze` without
# a spec) pays for neither module (nor for the TOML parser the spec module brings)
_SPEC_NAMES = frozenset(
    (
        "METRICS",
        "VERDICT_NAMES",
        "ChatterLimit",
        "LifeRequirement",
        "Limit",
        "PartSpec",
        "judge",
        "load_spec",
        "parse_spec",
        "shipped_specs",
        "unit_verdict",
        "unit_verdicts",
    )
)
_DRIFT_NAMES = frozenset(
    (
        "DRIFT_METRICS",
        "DRIFT_POINTS",
        "WINDOW_DTYPE",
        "Baseline",
        "DriftMonitor",
        "DriftReport",
        "Projection",
        "baseline",
        "CoarseSeries",
        "coarse_windows",
        "cusum",
        "drift",
        "drift_horizon",
        "drift_limit",
        "ewma",
        "judge_drift",
        "project",
        "window_stats",
    )
)


def __getattr__(name: str):
    if name in _SPEC_NAMES:
        from benchlog.analysis import _spec as module
    elif name in _DRIFT_NAMES:
        from benchlog.analysis import _drift as module
    else:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(module, name)
    globals()[name] = value
    return value


__all__ = [
    "ACTUATION_DTYPE",
    "AnalysisSettings",
    "Analyzer",
    "AnalyzerCounters",
    "BREAK",
    "Baseline",
    "CHATTER",
    "ChatterLimit",
    "CoarseSeries",
    "DEFAULT_CHATTER_THRESHOLD_NS",
    "DRIFT_METRICS",
    "DRIFT_POINTS",
    "DriftMonitor",
    "DriftReport",
    "FAIL",
    "FREE",
    "FREE_RUNNING",
    "GLITCHY",
    "INCOMPLETE",
    "LifeRequirement",
    "Limit",
    "MAKE",
    "MARGINAL",
    "METRICS",
    "MISSED",
    "NO_CHANGE",
    "NO_VERDICT",
    "PASS",
    "PartSpec",
    "Projection",
    "STUCK",
    "Segmenter",
    "VERDICT_NAMES",
    "WINDOW_DTYPE",
    "baseline",
    "blank_incomplete",
    "power_off_ns",
    "coarse_windows",
    "cusum",
    "drift",
    "drift_horizon",
    "drift_limit",
    "empty_actuations",
    "ewma",
    "judge",
    "judge_drift",
    "load_settings",
    "load_spec",
    "measure",
    "parse_spec",
    "project",
    "shipped_specs",
    "summarize",
    "Summaries",
    "unit_verdict",
    "unit_verdicts",
    "window_stats",
]
