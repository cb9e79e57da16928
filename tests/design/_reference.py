"""Plain per-sample debouncers, written straight from their textbook descriptions, to check the
vectorised run-length versions against on small inputs (common practice, no source)."""

from __future__ import annotations

import numpy as np


def samples(t_ns, level, ts, initial=None, t_end=None):
    t = np.asarray(t_ns, np.int64)
    k0 = -(-t[0] // ts) - 1
    end = t[-1] + ts if t_end is None else t_end
    k_end = max(-(-end // ts), -(-t[-1] // ts) + 1)
    ks = np.arange(k0, k_end)
    idx = np.searchsorted(t, ks * ts, side="right") - 1
    init = 1 - level[0] if initial is None else initial
    x = np.where(idx >= 0, np.asarray(level)[np.maximum(idx, 0)], init)
    return ks, x


def stable(ks, x, n):
    y, count, out = x[0], 0, []
    for k, v in zip(ks, x, strict=True):
        count = count + 1 if v != y else 0
        if count >= n:
            y, count = v, 0
            out.append((k, v))
    return out


def integrator(ks, x, n):
    y = x[0]
    c = n if y == 1 else 0
    out = []
    for k, v in zip(ks, x, strict=True):
        c = min(c + 1, n) if v == 1 else max(c - 1, 0)
        if c == n and y == 0:
            y = 1
            out.append((k, 1))
        elif c == 0 and y == 1:
            y = 0
            out.append((k, 0))
    return out


def lockout(ks, x, n):
    y, free_at, out = x[0], -(10**18), []
    for k, v in zip(ks, x, strict=True):
        if k >= free_at and v != y:
            y = v
            free_at = k + n
            out.append((k, v))
    return out


def confirm(ks, x, make, brk):
    y, check, out = x[0], None, []
    for k, v in zip(ks, x, strict=True):
        if check is not None and k == check:
            check = None
            if v != y:
                y = v
                out.append((k, v))
                continue
        if check is None and v != y:
            w = make if v == 1 else brk
            if w == 0:
                y = v
                out.append((k, v))
            else:
                check = k + w
    return out


def score_rows(start, end, target, changes, initial):
    """Per window, straight from the definitions in `_score.py`: `changes[r]` is row r's list of
    (t, new level) in time order. Returns (changes, false, missed, delay) as nested lists."""
    out = []
    for r, ch in enumerate(changes):
        rows = []
        for s, e, tg in zip(start, end, target, strict=True):
            before_s = [v for t, v in ch if t < s]
            before_e = [v for t, v in ch if t < e]
            entering = before_s[-1] if before_s else initial[r]
            leaving = before_e[-1] if before_e else initial[r]
            inside = [(t, v) for t, v in ch if s <= t < e]
            good = leaving == tg and entering != tg
            into = [t for t, v in inside if v == tg]
            delay = into[0] - s if good and into else None
            rows.append((len(inside), len(inside) - int(good), leaving != tg, delay))
        out.append(rows)
    return out
