"""The report's figures: matplotlib's object API on an Agg canvas (no pyplot, no global backend),
each returned as PNG bytes."""

from __future__ import annotations

import io
import math

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from benchlog.stats import METRICS, LifeTable, UnitSample, WeibullFit, plot_positions

__all__ = ["COLOURS", "ecdf_png", "trend_png", "weibull_png"]

COLOURS = ("#2f5d8a", "#c7702b", "#4f8a3c", "#8a3c6d")  # incumbent first, candidate second


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


def ecdf_png(
    metric: str, samples: list[tuple[str, UnitSample]], limit: float | None, percentile: float | None
) -> bytes:
    """Empirical CDF of every actuation per population (log x), with the spec's limit."""
    m = METRICS[metric]
    k = m.display_scale
    fig = Figure(figsize=(9.6, 3.6))
    ax = fig.add_subplot(1, 1, 1)
    for i, (name, s) in enumerate(samples):
        if not len(s):
            continue
        order = np.argsort(s.values, kind="stable")
        x = s.values[order] * k
        w = np.ones(len(x)) if s.weights is None else s.weights[order]
        y = np.cumsum(w) / w.sum()
        if len(x) > 4000:  # thin for drawing only; every value is still in the statistics
            idx = np.unique(
                np.concatenate(
                    [np.linspace(0, len(x) - 1, 3000).astype(int), np.arange(max(0, len(x) - 200), len(x))]
                )
            )
            x, y = x[idx], y[idx]
        ax.step(
            x,
            y,
            where="post",
            color=COLOURS[i % len(COLOURS)],
            linewidth=1.6,
            label=f"{name} ({s.n_units} units, {len(s):,} values)",
        )
    if limit is not None:
        ax.axvline(
            limit * k,
            color="#b22222",
            linestyle="--",
            linewidth=1.2,
            label=f"limit {limit * k:g} {m.display_unit}",
        )
    if percentile is not None and percentile < 100:
        ax.axhline(
            percentile / 100.0, color="#888888", linestyle=":", linewidth=1.0, label=f"p{percentile:g}"
        )
    ax.set_xlim(left=0)
    ax.set_xlabel(f"{m.label} ({m.display_unit})" if m.display_unit else m.label)
    ax.set_ylabel("share of actuations at or below")
    ax.set_ylim(0, 1.02)
    _style(ax)
    ax.legend(loc="lower right", fontsize=8, frameon=False)
    fig.tight_layout()
    return _png(fig)


def trend_png(
    metric: str,
    series: list[tuple[str, int, np.ndarray, np.ndarray]],
    names: list[str],
    limit: float | None,
    percentile: float,
) -> bytes:
    """Per unit, the `percentile` of the metric in windows of cycles; one line per unit, coloured by
    population. `series`: (unit label, population index, window cycles, the percentile per window)."""
    m = METRICS[metric]
    k = m.display_scale
    fig = Figure(figsize=(9.6, 3.4))
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
    _style(ax)
    ax.legend(loc="best", fontsize=8, frameon=True, framealpha=0.9, edgecolor="#dddddd")
    fig.tight_layout()
    return _png(fig)


def weibull_png(
    tables: list[tuple[str, LifeTable, WeibullFit | None]], life: float | None, percent: float
) -> bytes:
    """Weibull probability plot: failures at their median ranks (Johnson's adjusted ranks, Benard),
    suspensions as ticks along the bottom, fitted lines, and the required life."""
    fig = Figure(figsize=(9.6, 4.4))
    ax = fig.add_subplot(1, 1, 1)
    ticks = [0.01, 0.02, 0.05, 0.1, 0.2, 0.3, 0.5, 0.632, 0.8, 0.9, 0.99]
    lo_t, hi_t = math.inf, 0.0
    for _, table, _ in tables:
        if len(table):
            lo_t, hi_t = min(lo_t, float(table.cycles.min())), max(hi_t, float(table.cycles.max()))
    if not math.isfinite(lo_t):
        lo_t, hi_t = 1.0, 10.0
    for i, (name, table, fit) in enumerate(tables):
        colour = COLOURS[i % len(COLOURS)]
        if not len(table):
            continue
        t, f = plot_positions(table)
        if len(t):
            ax.plot(
                t,
                np.log(-np.log1p(-f)),
                "o",
                color=colour,
                markersize=5,
                label=f"{name}: {table.failures} failed, {len(table) - table.failures} suspended",
            )
        susp = table.cycles[~table.failed]
        if len(susp):
            ax.plot(
                susp,
                np.full(len(susp), math.log(-math.log1p(-0.008))),
                "|",
                color=colour,
                markersize=10,
                alpha=0.7,
            )
        if fit is not None:
            xs = np.geomspace(lo_t / 3, hi_t * 3, 100)
            ax.plot(
                xs,
                fit.shape * (np.log(xs) - math.log(fit.scale)),
                "-",
                color=colour,
                linewidth=1.2,
                label=f"{name} fit: shape {fit.shape:.2f}, scale {fit.scale:,.0f}",
            )
    if life:
        ax.axvline(life, color="#b22222", linestyle="--", linewidth=1.2, label=f"required B{percent:g} life")
        ax.axhline(math.log(-math.log1p(-percent / 100)), color="#888888", linestyle=":", linewidth=1.0)
    ax.set_xscale("log")
    ax.set_yticks([math.log(-math.log1p(-p)) for p in ticks])
    ax.set_yticklabels([f"{p:.0%}" if p >= 0.1 else f"{p:.0%}" for p in ticks])
    ax.set_ylim(math.log(-math.log1p(-0.006)), math.log(-math.log1p(-0.995)))
    ax.set_xlim(lo_t / 3, hi_t * 3)
    ax.set_xlabel("cycles (log scale)")
    ax.set_ylabel("share failed (Weibull scale)")
    _style(ax)
    ax.legend(loc="upper left", fontsize=8, frameon=False)
    fig.tight_layout()
    return _png(fig)
