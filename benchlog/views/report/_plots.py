"""The report's figures: matplotlib's object API on an Agg canvas (no pyplot, no global backend),
each returned as PNG bytes."""

from __future__ import annotations

import io
import math
from collections import Counter
from dataclasses import dataclass

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from benchlog.stats import METRICS, LifeTable, UnitSample, WeibullFit, plot_positions

__all__ = [
    "COLOURS",
    "Plot",
    "ecdf_png",
    "ecdf_range",
    "suspension_marks",
    "trend_png",
    "weibull_png",
    "weibull_range",
]

COLOURS = ("#2f5d8a", "#c7702b", "#4f8a3c", "#8a3c6d")  # incumbent first, candidate second


@dataclass(frozen=True, slots=True)
class Plot:
    """A figure as PNG bytes with the x range drawn and the requirement it shows (None: none), so the
    page can state (and a test can check) that the requirement lies inside the axes."""

    png: bytes
    x_range: tuple[float, float]
    requirement: float | None = None


def _png(fig: Figure) -> bytes:
    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=96)
    return buf.getvalue()


def _style(ax) -> None:
    ax.grid(True, color="#dddddd", linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def ecdf_range(values: list[np.ndarray], limit: float | None) -> tuple[float, float]:
    """The x range of a distribution plot: from zero to past both the limit and the upper tail (the
    99.9th percentile of every population), so the region a verdict is about is not squeezed by a
    few far outliers; values beyond the right edge are counted in the legend."""
    tops = [float(np.percentile(v, 99.9)) for v in values if len(v)]
    top = max([*tops, limit or 0.0, 1e-12])
    return 0.0, top * 1.12


def ecdf_png(
    metric: str, samples: list[tuple[str, UnitSample]], limit: float | None, percentile: float | None
) -> Plot:
    """Per population, the empirical CDF of every actuation (left) and the share above each value on a
    log scale (right: the upper tail the verdict is about), with the spec's limit drawn on both."""
    m = METRICS[metric]
    k = m.display_scale
    fig = Figure(figsize=(9.6, 3.2))
    ax, tail = fig.subplots(1, 2, gridspec_kw={"width_ratios": [3, 2]})
    x_lo, x_hi = ecdf_range([s.values * k for _, s in samples], limit * k if limit is not None else None)
    floor = 1.0
    for i, (name, s) in enumerate(samples):
        if not len(s):
            continue
        order = np.argsort(s.values, kind="stable")
        x = s.values[order] * k
        w = np.ones(len(x)) if s.weights is None else s.weights[order]
        y = np.cumsum(w) / w.sum()
        floor = min(floor, 1.0 / w.sum())
        beyond = int(round(w[x > x_hi].sum()))
        if len(x) > 4000:  # thin for drawing only; every value is still in the statistics
            idx = np.unique(
                np.concatenate(
                    [np.linspace(0, len(x) - 1, 3000).astype(int), np.arange(max(0, len(x) - 400), len(x))]
                )
            )
            x, y = x[idx], y[idx]
        colour = COLOURS[i % len(COLOURS)]
        more = f"; {beyond:,} beyond the axis, up to {float(s.values.max()) * k:.3g}" if beyond else ""
        label = f"{name} ({s.n_units} units, {len(s):,} values{more})"
        ax.step(x, y, where="post", color=colour, linewidth=1.6, label=label)
        tail.step(x, np.clip(1.0 - y, floor / 2, None), where="post", color=colour, linewidth=1.6)
    for a in (ax, tail):
        if limit is not None:
            a.axvline(limit * k, color="#b22222", linestyle="--", linewidth=1.2)
        a.set_xlabel(f"{m.label} ({m.display_unit})" if m.display_unit else m.label)
        _style(a)
    if limit is not None:
        ax.plot(
            [],
            [],
            color="#b22222",
            linestyle="--",
            linewidth=1.2,
            label=f"limit {limit * k:.3g} {m.display_unit}",
        )
    if percentile is not None and percentile < 100:
        ax.axhline(
            percentile / 100.0, color="#888888", linestyle=":", linewidth=1.0, label=f"p{percentile:g}"
        )
        tail.axhline(1 - percentile / 100.0, color="#888888", linestyle=":", linewidth=1.0)
    ax.set_xlim(x_lo, x_hi)
    ax.set_ylim(0, 1.02)
    ax.set_ylabel("share of actuations at or below")
    med = min((float(np.median(s.values)) * k for _, s in samples if len(s)), default=x_lo)
    tail.set_xlim(med, x_hi)
    tail.set_yscale("log")
    tail.set_ylim(floor / 2, 1.0)
    tail.set_ylabel("share above (log scale)")
    tail.set_title("upper tail", fontsize=9)
    _legend(ax, loc="lower right", fontsize=7.5, frameon=True, framealpha=0.9, edgecolor="#dddddd")
    fig.tight_layout()
    return Plot(_png(fig), (x_lo, x_hi), limit * k if limit is not None else None)


def _legend(ax, **kw) -> None:
    """The axes' legend, when anything drawn has a label (an empty legend is a warning, and a box)."""
    if ax.get_legend_handles_labels()[0]:
        ax.legend(**kw)


def trend_png(
    metric: str,
    series: list[tuple[str, int, np.ndarray, np.ndarray]],
    names: list[str],
    limit: float | None,
    percentile: float,
) -> Plot:
    """Per unit, the `percentile` of the metric in windows of cycles; one line per unit, coloured by
    population. `series`: (unit label, population index, window cycles, the percentile per window)."""
    m = METRICS[metric]
    k = m.display_scale
    fig = Figure(figsize=(9.6, 2.9))
    ax = fig.add_subplot(1, 1, 1)
    seen: set[int] = set()
    for _, pop, cyc, val in series:
        if len(cyc) < 2:
            continue
        xs, ys = cyc, np.asarray(val) * k
        ax.plot(
            xs,
            ys,
            color=COLOURS[pop % len(COLOURS)],
            linewidth=1.0,
            alpha=0.75,
            label=None if pop in seen else names[pop],
        )
        seen.add(pop)
    if limit is not None:
        ax.axhline(limit * k, color="#b22222", linestyle="--", linewidth=1.2, label="limit")
    ax.set_xlabel("life cycles")
    ax.set_ylabel(f"p{percentile:g} {m.label} ({m.display_unit})")
    if not seen:
        ax.text(
            0.5,
            0.5,
            "no unit has two windows of cycles yet: no trend to draw",
            transform=ax.transAxes,
            ha="center",
            va="center",
            color="#555555",
        )
    _style(ax)
    _legend(ax, loc="best", fontsize=8, frameon=True, framealpha=0.9, edgecolor="#dddddd")
    fig.tight_layout()
    lo, hi = ax.get_xlim()
    return Plot(_png(fig), (float(lo), float(hi)))


def suspension_marks(cycles: np.ndarray) -> list[tuple[float, int]]:
    """One tick per distinct suspension time, with how many units it stands for (drawn beside the
    tick when more than one: units stopped together at the end of a test all sit on one tick)."""
    return sorted(Counter(float(c) for c in cycles).items())


def weibull_range(tables: list[tuple[str, LifeTable, WeibullFit | None]], life: float | None):
    """The cycles axis of the Weibull plot: every unit's cycles and the required life, with room on
    both sides (a factor of 2 on the log scale)."""
    values = [float(v) for _, table, _ in tables for v in table.cycles]
    if life:
        values.append(float(life))
    if not values:
        return 1.0, 10.0
    return min(values) / 2, max(values) * 2


def weibull_png(
    tables: list[tuple[str, LifeTable, WeibullFit | None]], life: float | None, percent: float
) -> Plot:
    """Weibull probability plot: failures at their median ranks (Johnson's adjusted ranks, Benard),
    suspensions as ticks along the bottom (with a count beside ticks where several units stopped at
    the same cycles), fitted lines, and the required life, always inside the axes."""
    fig = Figure(figsize=(9.6, 4.4))
    ax = fig.add_subplot(1, 1, 1)
    ticks = [0.01, 0.02, 0.05, 0.1, 0.2, 0.3, 0.5, 0.632, 0.8, 0.9, 0.99]
    x_lo, x_hi = weibull_range(tables, life)
    y_lo, y_hi = math.log(-math.log1p(-0.006)), math.log(-math.log1p(-0.995))
    for i, (name, table, fit) in enumerate(tables):
        colour = COLOURS[i % len(COLOURS)]
        if not len(table):
            continue
        t, f = plot_positions(table)
        failed = table.failures
        susp = table.cycles[~table.failed]
        label = f"{name}: {_count(failed, 'failure')}, {_count(len(susp), 'suspension')}"
        if len(t):
            ax.plot(t, np.log(-np.log1p(-f)), "o", color=colour, markersize=5, label=label)
        row = math.log(-math.log1p(-(0.0085 if i == 0 else 0.013)))  # one row of ticks per population
        for cycles_at, n in suspension_marks(susp):
            ax.plot([cycles_at], [row], "|", color=colour, markersize=10, markeredgewidth=1.6)
            if n > 1:
                ax.annotate(
                    f"{n}",
                    (cycles_at, row),
                    xytext=(4, 0),
                    textcoords="offset points",
                    va="center",
                    fontsize=8,
                    color=colour,
                    fontweight="bold",
                )
        if not len(t) and len(susp):
            ax.plot([], [], "|", color=colour, markersize=10, label=label)
        if fit is not None:
            xs = np.geomspace(x_lo, x_hi, 100)
            ax.plot(
                xs,
                fit.shape * (np.log(xs) - math.log(fit.scale)),
                "-",
                color=colour,
                linewidth=1.2,
                label=f"{name} fit: shape {fit.shape:.3g}, scale {fit.scale:,.0f} cycles",
            )
    if life:
        ax.axvline(
            life,
            color="#b22222",
            linestyle="--",
            linewidth=1.4,
            label=f"required B{percent:g} life {life:,.0f}",
        )
        ax.axhline(math.log(-math.log1p(-percent / 100)), color="#888888", linestyle=":", linewidth=1.0)
    ax.set_xscale("log")
    ax.set_yticks([math.log(-math.log1p(-p)) for p in ticks])
    ax.set_yticklabels([f"{p:.0%}" if p >= 0.1 else f"{p:.0%}" for p in ticks])
    ax.set_ylim(y_lo, y_hi)
    ax.set_xlim(x_lo, x_hi)
    ax.set_xlabel("cycles (log scale); ticks along the bottom: suspensions, a number beside one counts units")
    ax.set_ylabel("share failed (Weibull scale)")
    _style(ax)
    _legend(ax, loc="upper left", fontsize=8, frameon=True, framealpha=0.9, edgecolor="#dddddd")
    fig.tight_layout()
    lo, hi = ax.get_xlim()
    return Plot(_png(fig), (float(lo), float(hi)), float(life) if life else None)


def _count(n: int, word: str) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {word}s"
