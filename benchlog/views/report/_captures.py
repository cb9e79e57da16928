"""Analog captures in the report: each measured by the voltage definitions (as `benchlog scope` does
with its defaults) and shown as the capture figure of its first actuation with bounce."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from benchlog.errors import DataError
from benchlog.views.report._plots import Plot

CAPTURE_SUFFIXES = (".csv", ".txt", ".npz", ".wav")


@dataclass(frozen=True)
class CaptureFigure:
    name: str
    plot: Plot
    rule: str  # the voltage definition the edges were derived by
    rows: list[dict]  # the actuations found, as `benchlog scope --json` gives them


def capture_paths(given: list[str]) -> list[Path]:
    """The files given, a folder standing for its captures (by name, in order)."""
    out: list[Path] = []
    for item in given:
        p = Path(item)
        if p.is_dir():
            found = sorted(f for f in p.iterdir() if f.suffix.lower() in CAPTURE_SUFFIXES and f.is_file())
            if not found:
                raise DataError(f"{p}: no captures in this folder (.csv, .txt, .npz or .wav)")
            out += found
        else:
            out.append(p)
    return out


def capture_figures(given: list[str]) -> list[CaptureFigure]:
    from benchlog.analog import ScopeOptions, plot_capture, scope_capture

    figures = []
    for path in capture_paths(given):
        result = scope_capture(path, ScopeOptions())
        chart = result.chart
        plot = Plot(plot_capture(chart), (float(chart.t_ms[0]), float(chart.t_ms[-1])))
        doc = result.document
        figures.append(CaptureFigure(path.name, plot, doc["levels"]["rule"], doc["actuations"]))
    return figures
