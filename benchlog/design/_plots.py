"""Plots of the designer's results as PNG bytes (matplotlib, Agg), for the command, report and dashboard."""

from __future__ import annotations

import io

import numpy as np

from benchlog.design._actuations import ChannelRecord
from benchlog.design._eseries import format_si
from benchlog.design._hardware import Circuit, RCCheck
from benchlog.design._rc import node_curve
from benchlog.design._software import SweepPoint

_LABEL = {
    "lockout": "lockout",
    "stable": "stable for n samples",
    "integrator": "integrator",
    "confirm": "confirm after window",
}


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100)
    import matplotlib.pyplot as plt

    plt.close(fig)
    return buf.getvalue()


def _figure(w: float = 8.0, h: float = 4.5):
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt.subplots(figsize=(w, h), constrained_layout=True)


def plot_node_voltage(
    records: list[ChannelRecord], circuit: Circuit, check: RCCheck, points: int = 4000
) -> bytes:
    """Node voltage and contact state over the worst recorded actuation at nominal values, with VT+/VT-."""
    ri, ai = check.worst
    rec = records[ri]
    win = rec.windows
    net = circuit.corners(check.series, check.cap)
    t0, t1 = int(win.start[ai]), int(win.end[ai])
    a = rec.actuations[ai]
    span = max(int(a["t_settle_ns"]) - t0, 1)
    lo = t0 - span // 4 - 100_000
    hi = min(t1, t0 + 3 * span + 5 * int(1e9 * float(net.rp[0] * net.c[0])) + 200_000)
    at = np.linspace(lo, hi, points)
    v = node_curve(net, 0, rec.t_ns, rec.level, rec.initial, at)
    k = np.searchsorted(rec.t_ns, at, side="right") - 1
    contact = np.where(k >= 0, rec.level[np.maximum(k, 0)], rec.initial)
    fig, ax = _figure()
    ms = (at - t0) / 1e6
    ax.plot(ms, v, lw=1.4, label="node voltage")
    ax.step(
        ms,
        np.where(contact == 1, 0.0, float(net.vdd[0])) * 0.15 - 0.2 * float(net.vdd[0]),
        where="post",
        lw=0.8,
        color="grey",
        label="contact (low = closed)",
    )
    ax.axhline(float(net.vt_plus[0]), ls="--", color="tab:red", lw=1, label="VT+ (nominal)")
    ax.axhline(float(net.vt_minus[0]), ls="--", color="tab:green", lw=1, label="VT- (nominal)")
    vtp_r, vtm_r = circuit.thresholds.at_supply(circuit.supply)
    ax.axhspan(*vtp_r, color="tab:red", alpha=0.08)
    ax.axhspan(*vtm_r, color="tab:green", alpha=0.08)
    kind = "make" if win.target[ai] == 1 else "break"
    ax.set_title(
        f"worst recorded {kind} (cycle {int(a['cycle'])}): series {format_si(check.series, 'ohm')}, "
        f"C {format_si(check.cap, 'F')}, pull-up {format_si(float(net.rp[0]), 'ohm')}"
    )
    ax.set_xlabel("time from first transition (ms)")
    ax.set_ylabel("volts")
    ax.legend(loc="best", fontsize=8)
    return _png(fig)


def plot_latency(sweeps: dict[str, list[SweepPoint]]) -> bytes:
    """Added delay (p50, p99, max) against window length per debouncer; hollow = false transitions."""
    fig, ax = _figure()
    for i, (deb, pts) in enumerate(sweeps.items()):
        name = _LABEL.get(deb, deb)
        x_of = "window_ms"
        if deb == "confirm":
            pts = pts[len(pts) // 2 :]  # the break-window sweep, with the chosen make window
            if not pts:
                continue
            name = f"{name} (break window; make {pts[0].window_ms:g} ms)"
            x_of = "brk_ms"
        if not pts:
            continue
        x = np.array([getattr(p, x_of) for p in pts])
        p99 = np.array([p.delay_p99_ms for p in pts])
        mx = np.array([p.delay_max_ms for p in pts])
        clean = np.array([p.clean for p in pts])
        color = f"C{i}"
        ax.plot(x, p99, color=color, lw=1.4, label=f"{name} p99")
        ax.plot(x, mx, color=color, lw=0.8, ls=":", label=f"{name} max")
        ax.scatter(x[clean], p99[clean], color=color, s=12)
        ax.scatter(x[~clean], p99[~clean], facecolors="none", edgecolors=color, s=12)
    ax.set_xlabel("window (ms)")
    ax.set_ylabel("added delay from first transition (ms)")
    ax.set_title("delay against window (hollow: false or missed transitions in the recording)")
    ax.legend(fontsize=8)
    return _png(fig)


def plot_tradeoff(checks: list[RCCheck]) -> bytes:
    """Worst-corner delay against worst-corner margin for the RC candidates."""
    fig, ax = _figure()
    for c in checks:
        m = c.margin_worst_v if np.isfinite(c.margin_worst_v) else 0.0
        ax.scatter(c.delay_worst_ms, m, color="tab:blue" if c.passes else "tab:grey")
        ax.annotate(
            f"{format_si(c.series, 'ohm')} / {format_si(c.cap, 'F')}", (c.delay_worst_ms, m), fontsize=7
        )
    ax.set_xlabel("worst-corner delay (ms)")
    ax.set_ylabel("worst-corner margin (V)")
    ax.set_title("RC candidates: delay against margin")
    return _png(fig)
