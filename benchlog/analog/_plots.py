"""Plots of a capture: the trace, its thresholds, the derived edges, the bounce region and the RC node.

`text_chart` draws it in the terminal (plotext); `plot_capture` returns PNG bytes (matplotlib, Agg) for
the report. Both show the same stretch: around one actuation (the first one with bounce, or the one
asked for), or the whole capture, and the same things, each named in a legend with its value: the
contact voltage, both levels of the voltage definition (open above, closed below), the edges derived
from them, each actuation's bounce (first touch to settled), and, when an input is given, its two
thresholds (VT+ and VT-) and the voltage at the RC node in front of it. Long traces are reduced to a
min/max envelope per column, so a spike one sample wide still shows.
"""

from __future__ import annotations

import io
import re
from dataclasses import dataclass

import numpy as np

from benchlog.analog._capture import Capture
from benchlog.analog._measure import Measured
from benchlog.analog._rc import rc_node
from benchlog.analysis import INCOMPLETE


@dataclass(frozen=True, slots=True, eq=False)
class ChartData:
    """What both plots draw, in ms of run time and volts of the capture."""

    t_ms: np.ndarray
    v: np.ndarray
    node_t_ms: np.ndarray | None
    node_v: np.ndarray | None
    open_above: float
    closed_below: float
    edge_t_ms: np.ndarray
    edge_v: np.ndarray
    bounce_ms: list[tuple[float, float]]
    title: str
    input_levels: tuple[float, float] | None = None  # (VT+, VT-) of the input the contact drives
    input_name: str = ""
    rc_label: str = ""  # the RC network the node voltage is for, e.g. "10 kohm, 82 nF"

    def labels(self) -> dict[str, str]:
        """The legend's words for each thing drawn (both plots use them)."""
        out = {
            "trace": "contact V",
            "open": f"open above {self.open_above:.3g} V",
            "closed": f"closed below {self.closed_below:.3g} V",
            "edges": "derived edges",
            "bounce": "bounce: first touch to settled",
        }
        if self.node_v is not None:
            out["node"] = f"RC node ({self.rc_label})" if self.rc_label else "RC node"
        if self.input_levels is not None:
            out["vt_plus"] = f"input VT+ {self.input_levels[0]:.3g} V"
            out["vt_minus"] = f"input VT- {self.input_levels[1]:.3g} V"
        return out


def _span(cap: Capture, measured: Measured, actuation: int | None) -> tuple[int, int, int | None]:
    rows = measured.actuations
    n = len(cap)
    if not len(rows):
        return 0, n, None
    if actuation is None:
        ok = ((rows["flags"] & INCOMPLETE) == 0) & (rows["bounce_count"] > 0)
        actuation = int(np.argmax(ok)) if ok.any() else 0
    a = rows[min(actuation, len(rows) - 1)]
    first = int(a["t_first_ns"]) if a["t_first_ns"] >= 0 else int(a["t_start_ns"])
    settle = int(a["t_settle_ns"]) if a["t_settle_ns"] >= 0 else first
    span = max(settle - first, 50_000)
    lo_ns, hi_ns = first - span // 2 - 20_000, settle + span + 20_000
    dt_ns = cap.dt_s * 1e9
    if cap.t_s is None:
        k0, k1 = int(max(lo_ns / dt_ns, 0)), int(min(hi_ns / dt_ns + 1, n))
    else:
        base = (cap.t_s - cap.t0_s) * 1e9
        k0, k1 = int(np.searchsorted(base, lo_ns)), int(np.searchsorted(base, hi_ns))
    return k0, max(k1, k0 + 2), actuation


def _envelope(t: np.ndarray, v: np.ndarray, points: int) -> tuple[np.ndarray, np.ndarray]:
    if len(v) <= points:
        return t, v
    bins = points // 2
    edges = np.linspace(0, len(v), bins + 1).astype(np.int64)
    lo = np.minimum.reduceat(v, edges[:-1])
    hi = np.maximum.reduceat(v, edges[:-1])
    tt = np.repeat(t[edges[:-1]], 2)
    vv = np.ravel(np.column_stack((lo, hi)))
    return tt, vv


def chart_data(
    cap: Capture,
    v: np.ndarray,
    measured: Measured,
    *,
    tau_s: float | None = None,
    actuation: int | None = None,
    points: int = 2000,
    input_levels: tuple[float, float] | None = None,
    input_name: str = "",
    rc_label: str = "",
) -> ChartData:
    """The stretch to draw; `tau_s` adds the RC node (the trace through a first-order filter),
    `input_levels` the (VT+, VT-) of the input it drives."""
    k0, k1, which = _span(cap, measured, actuation)
    idx = np.arange(k0, k1)
    t_ms = (cap.times_s(idx) - cap.t0_s) * 1e3
    seg = np.asarray(v[k0:k1], np.float64)
    node_t = node_v = None
    if tau_s:
        h = cap.dt_s if cap.t_s is None else np.diff(cap.t_s[k0:k1])
        node = rc_node(seg, h, np.array([tau_s]))[0]
        node_t, node_v = _envelope(t_ms, node, points)
    tt, vv = _envelope(t_ms, seg, points)
    e_ms = (measured.edges.t_s - cap.t0_s) * 1e3
    inside = (e_ms >= t_ms[0]) & (e_ms <= t_ms[-1])
    lv = measured.levels
    e_v = np.where(measured.edges.level[inside] == 1, lv.closed_below, lv.open_above)
    bounce = []
    for a in measured.actuations:
        if a["t_first_ns"] >= 0 and a["t_settle_ns"] >= 0:
            f, s = a["t_first_ns"] / 1e6, a["t_settle_ns"] / 1e6
            if s >= t_ms[0] and f <= t_ms[-1]:
                bounce.append((float(f), float(s)))
    what = f"actuation {which + 1}" if which is not None else "whole capture"
    title = f"{cap.source} - {measured.channel}, {what}"
    return ChartData(
        tt,
        vv,
        node_t,
        node_v,
        lv.open_above,
        lv.closed_below,
        e_ms[inside],
        e_v,
        bounce,
        title,
        input_levels,
        input_name,
        rc_label,
    )


_ANSI = re.compile(r"\x1b\[[0-9;]*m")


def text_chart(data: ChartData, width: int = 100, height: int = 28, colour: bool = False) -> str:
    """The chart as terminal text (plotext), with its key below it. Without colour the lines look alike,
    so each level is named on the chart at its end (the definition's at the right, the input's at the
    left), the bounce between its vertical lines, and the traces by their markers in the key."""
    import plotext

    words = data.labels()
    f = plotext.figure
    f.clear()
    f.plot_size(width, height)
    f.theme("default" if colour else "colorless")
    f.draw(f.signal(data.t_ms.tolist(), data.v.tolist()).lines())
    key = [f"▚ {words['trace']}"]
    if data.node_v is not None and data.node_t_ms is not None:
        f.draw(f.signal(data.node_t_ms.tolist(), data.node_v.tolist(), marker="•"))
        key.append(f"• {words['node']}")
    if len(data.edge_t_ms):
        f.draw(f.signal(data.edge_t_ms.tolist(), data.edge_v.tolist(), marker="x"))
        key.append(f"x {words['edges']}")
    left, right = float(data.t_ms[0]), float(data.t_ms[-1])
    for y, word, x, side in (
        (data.open_above, words["open"], right, "right"),
        (data.closed_below, words["closed"], right, "right"),
        *(
            (
                (data.input_levels[0], words["vt_plus"], left, "left"),
                (data.input_levels[1], words["vt_minus"], left, "left"),
            )
            if data.input_levels is not None
            else ()
        ),
    ):
        f.line(y)
        f.draw(f.text(x, y, word, alignment=side))
    top = float(max(data.v.max(), data.open_above))
    for i, (first, settle) in enumerate(data.bounce_ms):
        f.line(first, orientation="v")
        f.line(settle, orientation="v")
        if i == 0:
            f.draw(f.text((first + settle) / 2, top, "bounce", alignment="center"))
    if data.bounce_ms:
        key.append(f"│ │ {words['bounce']}")
    f.legend(active=False)
    f.title(data.title)
    f.label("ms")
    text = f.build().string()
    f.clear()
    text = text.rstrip("\n") + "\n  key: " + "   ".join(key) + "\n"
    return text if colour else _ANSI.sub("", text)


def capture_figure(data: ChartData):
    """The chart as a matplotlib figure (Agg); its legend names each thing drawn."""
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    words = data.labels()
    fig, ax = plt.subplots(figsize=(9, 4.5), constrained_layout=True)
    for i, (first, settle) in enumerate(data.bounce_ms):
        ax.axvspan(first, settle, color="tab:orange", alpha=0.15, lw=0, label=None if i else words["bounce"])
    ax.plot(data.t_ms, data.v, lw=0.8, color="tab:blue", label=words["trace"])
    if data.node_v is not None:
        ax.plot(data.node_t_ms, data.node_v, lw=1.4, color="tab:green", label=words["node"])
    ax.axhline(data.open_above, color="tab:red", ls="--", lw=0.9, label=words["open"])
    ax.axhline(data.closed_below, color="tab:purple", ls="--", lw=0.9, label=words["closed"])
    if data.input_levels is not None:
        ax.axhline(data.input_levels[0], color="tab:green", ls=":", lw=1.1, label=words["vt_plus"])
        ax.axhline(data.input_levels[1], color="tab:olive", ls=":", lw=1.1, label=words["vt_minus"])
    if len(data.edge_t_ms):
        ax.plot(data.edge_t_ms, data.edge_v, "x", color="black", ms=5, label=words["edges"])
    ax.set_xlabel("ms from the first sample")
    ax.set_ylabel("V")
    ax.set_title(data.title, fontsize=10)
    ax.legend(loc="center left", bbox_to_anchor=(1.01, 0.5), fontsize=8)
    return fig


def plot_capture(data: ChartData) -> bytes:
    """The chart as PNG bytes (matplotlib, Agg), for the report."""
    import matplotlib.pyplot as plt

    fig = capture_figure(data)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100)
    plt.close(fig)
    return buf.getvalue()
