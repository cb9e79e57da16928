"""Exact node voltage of a pull-up + series resistor + capacitor network driven by a recorded contact.

The circuit (one input):

```
 Vdd --[ Rp pull-up ]--+-- node --> Schmitt input (VT+, VT-)
                       |
                      [C] to ground
                       |
 node --[ Rs series ]-- contact -- ground
```

Contact open: the node charges toward Vdd with tau = Rp C. Contact closed: it discharges toward the
divider level Vdd Rs / (Rp + Rs) with tau = (Rp || Rs) C (Rs = 0: at once). Between two edges the node
is exactly `v_inf + (v0 - v_inf) exp(-dt / tau)`, a map `v -> a v + b`; the voltage at every edge is the
composition of those affine maps, computed for all edges at once with a parallel prefix scan (log2 of the
edge count steps, O(n) work), without time steps and without a loop over edges. Rows are independent
networks (tolerance corners, candidate values) driven by the same edges.

The Schmitt input goes low when the node falls below VT- and high when it rises above VT+. Within one
segment the node is monotone, so the crossing time is closed form: `t0 + tau ln((v0 - v_inf) / (vt - v_inf))`.
A low pin means a closed contact.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, slots=True, eq=False)
class Networks:
    """Rows of network values (1-D arrays of one length, or scalars broadcast): volts, ohms, farads."""

    vdd: np.ndarray
    rp: np.ndarray
    rs: np.ndarray
    c: np.ndarray
    vt_plus: np.ndarray
    vt_minus: np.ndarray

    @classmethod
    def of(cls, vdd, rp, rs, c, vt_plus, vt_minus) -> Networks:
        arrs = np.broadcast_arrays(
            *(np.atleast_1d(np.asarray(x, np.float64)) for x in (vdd, rp, rs, c, vt_plus, vt_minus))
        )
        return cls(*(np.ascontiguousarray(a) for a in arrs))

    def __len__(self) -> int:
        return len(self.vdd)

    def take(self, idx) -> Networks:
        return Networks(*(getattr(self, f)[idx] for f in Networks.__slots__))

    def steady(self, closed) -> np.ndarray:
        """Settled node voltage per row for contact state `closed` (0/1 array, rows x n)."""
        low = self.vdd * self.rs / (self.rp + self.rs)
        return np.where(np.asarray(closed) == 1, low[:, None], self.vdd[:, None])

    def tau_ns(self, closed) -> np.ndarray:
        par = self.rp * self.rs / (self.rp + self.rs)
        return np.where(
            np.asarray(closed) == 1, (par * self.c * 1e9)[:, None], (self.rp * self.c * 1e9)[:, None]
        )


def _hillis_steele(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    a, b = a.copy(), b.copy()
    shift = 1
    n = a.shape[-1]
    while shift < n:
        nb = a[..., shift:] * b[..., :-shift] + b[..., shift:]
        na = a[..., shift:] * a[..., :-shift]
        a[..., shift:], b[..., shift:] = na, nb
        shift *= 2
    return a, b


def affine_scan(a: np.ndarray, b: np.ndarray, block: int = 64) -> tuple[np.ndarray, np.ndarray]:
    """Inclusive prefix composition along the last axis of maps `v -> a v + b`.

    Two levels, O(n) work: every block of `block` maps is composed sequentially (one numpy step per
    position, across all blocks and rows at once), the block totals are scanned (Hillis-Steele), and
    each block's prefix is applied to its local results.
    """
    n = a.shape[-1]
    if n <= 4 * block:
        return _hillis_steele(a, b)
    lead = a.shape[:-1]
    pad = (-n) % block
    if pad:
        a = np.concatenate((a, np.ones(lead + (pad,))), axis=-1)
        b = np.concatenate((b, np.zeros(lead + (pad,))), axis=-1)
    nblk = a.shape[-1] // block
    # (block position, rows..., block index): each position is one contiguous slab
    la = np.ascontiguousarray(np.moveaxis(a.reshape(lead + (nblk, block)), -1, 0))
    lb = np.ascontiguousarray(np.moveaxis(b.reshape(lead + (nblk, block)), -1, 0))
    for j in range(1, block):
        lb[j] += la[j] * lb[j - 1]
        la[j] *= la[j - 1]
    ta, tb = _hillis_steele(la[-1], lb[-1])
    pa = np.concatenate((np.ones(lead + (1,)), ta[..., :-1]), axis=-1)
    pb = np.concatenate((np.zeros(lead + (1,)), tb[..., :-1]), axis=-1)
    lb += la * pb
    la *= pa
    out_a = np.moveaxis(la, 0, -1).reshape(lead + (nblk * block,))[..., :n]
    out_b = np.moveaxis(lb, 0, -1).reshape(lead + (nblk * block,))[..., :n]
    return out_a, out_b


def node_at_edges(net: Networks, t_ns: np.ndarray, level: np.ndarray, initial: int) -> np.ndarray:
    """Node voltage at each edge time, just before the edge acts (rows x edges). Starts settled."""
    t = np.asarray(t_ns, np.int64)
    lv = np.asarray(level, np.int8)
    v0 = net.steady(np.full((1, 1), initial))[:, 0]
    if len(t) == 0:
        return np.zeros((len(net), 0))
    dt = np.diff(t).astype(np.float64)[None, :]
    state = lv[:-1][None, :]
    tau = net.tau_ns(state)
    vinf = net.steady(state)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        a = np.where(tau > 0, np.exp(-dt / np.where(tau > 0, tau, 1.0)), 0.0)
    a = np.where(dt == 0, 1.0, a)
    b = vinf * (1.0 - a)
    big_a, big_b = affine_scan(a, b)
    out = np.empty((len(net), len(t)))
    out[:, 0] = v0
    out[:, 1:] = big_a * v0[:, None] + big_b
    return out


@dataclass(frozen=True, slots=True, eq=False)
class InputChanges:
    """Changes of the Schmitt input, as contact levels (1 = pin low = closed), over all rows."""

    row: np.ndarray
    t_ns: np.ndarray  # float ns
    new: np.ndarray  # int8
    initial: np.ndarray  # per row
    v_edges: np.ndarray  # rows x edges, the node at each edge


def schmitt(net: Networks, t_ns: np.ndarray, level: np.ndarray, initial: int) -> InputChanges:
    t = np.asarray(t_ns, np.int64)
    lv = np.asarray(level, np.int8)
    v = node_at_edges(net, t, lv, initial)
    vinf = net.steady(lv[None, :])  # rows x n: where each segment heads
    tau = net.tau_ns(lv[None, :])
    v_end = np.empty_like(v)
    v_end[:, :-1] = v[:, 1:]
    v_end[:, -1] = vinf[:, -1]
    vtp, vtm = net.vt_plus[:, None], net.vt_minus[:, None]
    closing = lv[None, :] == 1
    falls = closing & (v_end < vtm)
    rises = ~closing & (v_end > vtp)
    with np.errstate(divide="ignore", invalid="ignore"):
        cross_fall = np.log(np.maximum(v - vinf, 1e-300) / np.maximum(vtm - vinf, 1e-300)) * tau
        cross_rise = np.log(np.maximum(vinf - v, 1e-300) / np.maximum(vinf - vtp, 1e-300)) * tau
    cross = np.where(falls, np.where(v <= vtm, 0.0, cross_fall), np.where(v >= vtp, 0.0, cross_rise))
    cross = np.nan_to_num(cross, nan=0.0, posinf=0.0)
    hit = np.where(falls, 0, np.where(rises, 1, -1)).astype(np.int8)  # pin level reached
    v0 = v[:, 0]
    pin0 = np.where(v0 >= net.vt_plus, 1, np.where(v0 <= net.vt_minus, 0, 1 - initial)).astype(np.int8)
    idx = np.where(hit >= 0, np.arange(len(t))[None, :], -1)
    np.maximum.accumulate(idx, axis=1, out=idx)
    after = np.where(idx >= 0, np.take_along_axis(hit, np.maximum(idx, 0), axis=1), pin0[:, None])
    before = np.concatenate((pin0[:, None], after[:, :-1]), axis=1)
    change = (hit >= 0) & (hit != before)
    r, k = np.nonzero(change)
    times = t[k] + cross[r, k]
    return InputChanges(
        r.astype(np.int64), times, (1 - hit[r, k]).astype(np.int8), (1 - pin0).astype(np.int8), v
    )


def node_curve(
    net: Networks, row: int, t_ns: np.ndarray, level: np.ndarray, initial: int, at_ns: np.ndarray
) -> np.ndarray:
    """Node voltage of one row at arbitrary times (exact, for plots)."""
    one = net.take([row])
    t = np.asarray(t_ns, np.int64)
    v = node_at_edges(one, t, level, initial)[0]
    k = np.searchsorted(t, at_ns, side="right") - 1
    before = k < 0
    kk = np.maximum(k, 0)
    state = np.where(before, initial, np.asarray(level)[kk])
    vinf = one.steady(state[None, :])[0]
    tau = one.tau_ns(state[None, :])[0]
    v0 = np.where(before, one.steady(np.full((1, 1), initial))[0, 0], v[kk])
    dt = np.where(before, 0.0, at_ns - t[kk])
    with np.errstate(divide="ignore", invalid="ignore"):
        decay = np.where(tau > 0, np.exp(-dt / np.where(tau > 0, tau, 1.0)), np.where(dt > 0, 0.0, 1.0))
    return vinf + (v0 - vinf) * decay
