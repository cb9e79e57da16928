"""Terminal charts drawn with Rich text: a trend chart and a histogram, legible at 100x30.

Each series has its own character as well as its own colour, so the charts read on a monochrome
terminal too. Pure functions of their inputs (no global state), so they can be drawn anywhere.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from rich.text import Text

from ._data import cycles_text

Y_LABEL = 7  # characters of the y axis labels


@dataclass(frozen=True, slots=True)
class Series:
    label: str
    x: np.ndarray
    y: np.ndarray
    char: str
    style: str


@dataclass(frozen=True, slots=True)
class Level:
    label: str
    y: float
    char: str
    style: str


def _scale(v: np.ndarray, lo: float, hi: float, n: int) -> np.ndarray:
    span = hi - lo if hi > lo else 1.0
    return np.clip(((v - lo) / span * (n - 1)).round().astype(np.int64), 0, n - 1)


def _ylabel(v: float, unit_div: float) -> str:
    x = v / unit_div
    text = f"{x:.3g}" if abs(x) < 1000 else f"{x:.0f}"
    return text.rjust(Y_LABEL - 1)[: Y_LABEL - 1] + " "


def trend_chart(
    series: list[Series],
    levels: list[Level],
    marks: Series | None,
    width: int,
    height: int,
    unit_div: float = 1000.0,
) -> Text:
    """Values against cycles. `levels` are horizontal lines (spec limit, baseline); `marks` are points
    drawn over everything (chart signals). Values are divided by `unit_div` for the axis labels."""
    w = max(10, width - Y_LABEL)
    h = max(3, height - 2)
    xs = [s.x for s in series if len(s.x)]
    if not xs:
        return Text("no rollup windows yet", style="dim")
    x_all = np.concatenate(xs).astype(np.float64)
    x_lo, x_hi = float(x_all.min()), float(x_all.max())
    ys = [s.y[~np.isnan(s.y)] for s in series if len(s.y)]
    ys = [y for y in ys if len(y)]
    y_hi = max([float(y.max()) for y in ys] + [lv.y for lv in levels if math.isfinite(lv.y)] + [0.0])
    y_hi = y_hi * 1.05 if y_hi > 0 else 1.0
    y_lo = 0.0
    grid = [[(" ", "")] * w for _ in range(h)]
    for lv in sorted(levels, key=lambda lv: lv.char == "="):
        if not math.isfinite(lv.y):
            continue
        r = h - 1 - int(_scale(np.array([lv.y]), y_lo, y_hi, h)[0])
        grid[r] = [(lv.char, lv.style)] * w
    for s in [*series, *([marks] if marks is not None else [])]:
        ok = ~np.isnan(s.y)
        if not ok.any():
            continue
        cols = _scale(s.x[ok].astype(np.float64), x_lo, x_hi, w)
        rows = h - 1 - _scale(s.y[ok].astype(np.float64), y_lo, y_hi, h)
        for r, c in set(zip(rows.tolist(), cols.tolist(), strict=True)):
            grid[r][c] = (s.char, s.style)
    out = Text()
    for r in range(h):
        if r in (0, h // 2, h - 1):
            v = y_hi - (y_hi - y_lo) * r / (h - 1)
            out.append(_ylabel(v, unit_div), style="dim")
        else:
            out.append(" " * (Y_LABEL - 1) + "|", style="dim")
        for ch, st in grid[r]:
            out.append(ch, style=st or None)
        out.append("\n")
    out.append(" " * (Y_LABEL - 1) + "+" + "-" * w + "\n", style="dim")
    left, mid, right = cycles_text(x_lo), cycles_text((x_lo + x_hi) / 2), cycles_text(x_hi)
    axis = [" "] * (w + Y_LABEL)
    for pos, label in (
        (Y_LABEL, left),
        (Y_LABEL + w // 2 - len(mid) // 2, mid),
        (Y_LABEL + w - len(right), right),
    ):
        for i, ch in enumerate(label):
            if 0 <= pos + i < len(axis):
                axis[pos + i] = ch
    out.append("".join(axis).rstrip() + "  cycles", style="dim")
    return out


def legend(series: list[Series], levels: list[Level], marks: Series | None) -> Text:
    """Every mark of a `trend_chart` with its words, on one line (under 80 columns for the history
    screen's series, limit and baseline): `char label`, two spaces apart."""
    out = Text()
    items = [(s.char, s.style, s.label) for s in [*series, *([marks] if marks is not None else [])]]
    items += [(lv.char, lv.style, lv.label) for lv in levels if math.isfinite(lv.y)]
    for i, (char, style, label) in enumerate(items):
        out.append("  " if i else "")
        out.append(char, style=style)
        out.append(f" {label}")
    return out


HIST_FULL, HIST_LOW, HIST_OVER, HIST_LIMIT = "█", "▁", "#", "^"


def histogram_legend(limit: float | None, peak_words: str = "actuations") -> Text:
    """The marks of a `histogram`, on one line."""
    out = Text()
    out.append(HIST_FULL + HIST_LOW, style="cyan")
    out.append(f" {peak_words} per bin (top left: the fullest bin)")
    if limit is not None:
        out.append("  ")
        out.append(HIST_OVER, style="red")
        out.append(" past the limit  ")
        out.append(HIST_LIMIT, style="bold red")
        out.append(" limit")
    return out


def histogram(
    values: np.ndarray,
    width: int,
    height: int,
    limit: float | None = None,
    unit_div: float = 1000.0,
    unit: str = " ms",
) -> Text:
    """Counts of `values` in bins across the width; bins past `limit` are drawn with another texture."""
    w = max(10, width - Y_LABEL)
    h = max(2, height - 2)
    v = np.asarray(values, np.float64)
    v = v[~np.isnan(v)]
    if not len(v):
        return Text("no actuations in this span", style="dim")
    top = max(float(v.max()), limit or 0.0) * 1.02 or 1.0
    bins = w
    counts, edges = np.histogram(v, bins=bins, range=(0.0, top))
    peak = int(counts.max()) or 1
    heights = counts / peak * h
    over = edges[:-1] >= limit if limit is not None else np.zeros(bins, bool)
    out = Text()
    for r in range(h):
        level = h - r
        if r == 0:
            out.append(f"{peak:>{Y_LABEL - 1}} ", style="dim")
        else:
            out.append(" " * (Y_LABEL - 1) + "|", style="dim")
        for b in range(bins):
            hb = heights[b]
            if hb >= level - 0.5:
                ch = HIST_OVER if over[b] else HIST_FULL
            elif level == 1 and counts[b] > 0:
                ch = HIST_OVER if over[b] else HIST_LOW
            else:
                ch = " "
            style = "red" if over[b] else "cyan"
            out.append(ch, style=style if ch != " " else None)
        out.append("\n")
    axis = [" "] * (w + Y_LABEL)
    lim_col = None
    if limit is not None:
        lim_col = Y_LABEL + int(min(bins - 1, limit / top * bins))
    # the limit is marked on the axis line, never over a value label below it
    base = "-" * w
    if lim_col is not None:
        c = lim_col - Y_LABEL
        out.append(" " * (Y_LABEL - 1) + "+" + base[:c], style="dim")
        out.append(HIST_LIMIT, style="bold red")
        out.append(base[c + 1 :] + "\n", style="dim")
    else:
        out.append(" " * (Y_LABEL - 1) + "+" + base + "\n", style="dim")
    labels = [(Y_LABEL, "0")]
    labels.append((Y_LABEL + w // 2, f"{top / 2 / unit_div:.3g}"))
    end = f"{top / unit_div:.3g}{unit}"
    labels.append((Y_LABEL + w - len(end), end))
    for pos, label in labels:
        for i, ch in enumerate(label):
            if 0 <= pos + i < len(axis):
                axis[pos + i] = ch
    out.append("".join(axis).rstrip(), style="dim")
    return out
