"""Firmware debouncers replayed on sampled runs (see `_runs.py`), each returning its accepted transitions.

Every debouncer starts with its output equal to the first sampled value and returns the sample index of
each accepted change and the new output level. Parameters are in samples of the sampling period.

- `stable`: accept a new level once the input has shown it for `n` consecutive samples. On runs this is
  closed form: the output is the value of the latest run at least `n` long.
- `integrator`: an up/down counter clipped to `0..n` (+1 on a closed sample, -1 on an open one); the
  output goes closed when the counter reaches `n` and open when it reaches 0. Within a run the counter
  moves one way, so each run is the map `c -> clip(c +- length, 0, n)`. Maps of the form
  `c -> min(max(c + d, lo), hi)` compose into the same form, so the counter after every run comes from
  one parallel prefix scan (log2 of the run count passes), with no loop over samples or runs.
- `lockout`: accept any change at once, then ignore the input for `n` samples; at the end of the lockout
  the input is looked at again.
- `confirm`: a state machine with separate make and break windows. A change starts a window (`make`
  samples toward closed, `brk` toward open); at its end the input is sampled once: still changed means
  accepted, otherwise the machine goes back to waiting. Its delay is fixed; a bounce in progress at the
  confirming sample either is taken early or costs another window.

`lockout` and `confirm` carry a state that a closed form does not give. A run long enough forgets the
past (at least `2n` samples for the lockout, `max(make, brk) + 1` for the state machine: the output then
equals the run's value and nothing is pending), so the runs split into independent segments there. The
segments are stepped together, one run of every segment per numpy step: the loop is over the longest
segment (a bounce burst), not over edges.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from benchlog.design._runs import SampledRuns

Transitions = tuple[np.ndarray, np.ndarray]  # (sample index int64, new level int8)


def stable(runs: SampledRuns, n: int) -> Transitions:
    n = max(int(n), 1)
    long = runs.length >= n
    vals = runs.value[long]
    prev = np.concatenate(([runs.value[0]], vals[:-1]))
    change = vals != prev
    return (runs.start[long][change] + n - 1).astype(np.int64), vals[change].astype(np.int8)


def compose_clips(
    d: np.ndarray, lo: np.ndarray, hi: np.ndarray, reach: int | None = None
) -> tuple[np.ndarray, ...]:
    """Inclusive prefix composition of maps `c -> min(max(c + d, lo), hi)` (Hillis-Steele scan).

    `reach`: every map is preceded within `reach` maps (itself included) by one that forgets its input
    (constant over the values that occur) or by the first map; the passes stop once each composes that
    far back, which gives the same value at every start value that occurs.
    """
    d, lo, hi = d.copy(), lo.copy(), hi.copy()
    shift, limit = 1, len(d) if reach is None else min(len(d), reach)
    while shift < limit:
        d1, lo1, hi1 = d[:-shift], lo[:-shift], hi[:-shift]  # earlier maps
        d2, lo2, hi2 = d[shift:], lo[shift:], hi[shift:]  # later maps
        new_hi = np.minimum(np.maximum(hi1 + d2, lo2), hi2)
        new_lo = np.minimum(np.maximum(lo1 + d2, lo2), new_hi)
        new_d = d1 + d2
        d[shift:], lo[shift:], hi[shift:] = new_d, new_lo, new_hi
        shift *= 2
    return d, lo, hi


def integrator(runs: SampledRuns, n: int) -> Transitions:
    n = max(int(n), 1)
    step = np.where(runs.value == 1, runs.length, -runs.length).astype(np.int64)
    zeros = np.zeros(len(runs), np.int64)
    # a run of n samples or more drives the counter to its end whatever it was: the past is forgotten
    forget = np.flatnonzero(runs.length >= n)
    last = np.zeros(len(runs), np.int64)
    last[forget] = forget
    np.maximum.accumulate(last, out=last)
    reach = int((np.arange(len(runs)) - last).max(initial=0)) + 1
    d, lo, hi = compose_clips(step, zeros, np.full(len(runs), n, np.int64), reach)
    c0 = n if runs.value[0] == 1 else 0
    after = np.minimum(np.maximum(c0 + d, lo), hi)
    before = np.concatenate(([c0], after[:-1]))
    up = (runs.value == 1) & (before + runs.length >= n)
    down = (runs.value == 0) & (before - runs.length <= 0)
    hit = np.where(up, 1, np.where(down, 0, -1)).astype(np.int8)
    idx = np.where(hit >= 0, np.arange(len(runs)), -1)
    np.maximum.accumulate(idx, out=idx)
    out_after = np.where(idx >= 0, hit[np.maximum(idx, 0)], runs.value[0])
    out_before = np.concatenate(([runs.value[0]], out_after[:-1]))
    change = (hit >= 0) & (hit != out_before)
    at = np.where(hit == 1, runs.start + n - before - 1, runs.start + before - 1)
    return at[change].astype(np.int64), hit[change]


StepFn = Callable[[dict[str, np.ndarray], np.ndarray, np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]


def _lockstep(
    runs: SampledRuns,
    forget: np.ndarray,
    init: Callable[[int], dict[str, np.ndarray]],
    step: StepFn,
    fresh: np.ndarray | None = None,
) -> Transitions:
    """Step every independent segment at once; `forget[r]` says run r resets the state after it.
    `fresh[r]` marks a run that starts a recording of its own (several channels replayed together):
    a segment starts there, its output equal to that run's value."""
    nrun = len(runs)
    if fresh is None:
        fresh = np.zeros(nrun, bool)
        fresh[0] = True
    forget = forget.copy()
    forget[np.flatnonzero(fresh)[1:] - 1] = True
    seg_start = np.concatenate(([0], np.flatnonzero(forget[:-1]) + 1))
    seg_len = np.diff(np.concatenate((seg_start, [nrun])))
    order = np.argsort(-seg_len, kind="stable")
    seg_start, seg_len = seg_start[order], seg_len[order]
    state = init(seg_start)
    state["y"] = np.where(
        fresh[seg_start], runs.value[seg_start], runs.value[np.maximum(seg_start - 1, 0)]
    ).astype(np.int8)
    neg_len = -seg_len
    at_parts, val_parts = [], []
    for j in range(int(seg_len.max()) if nrun else 0):
        k = int(np.searchsorted(neg_len, -j, side="left"))
        view = {key: arr[:k] for key, arr in state.items()}
        r = seg_start[:k] + j
        at, val = step(view, runs.value[r].astype(np.int8), runs.start[r], runs.length[r])
        at_parts.append(at)
        val_parts.append(val)
    if not at_parts:
        return np.zeros(0, np.int64), np.zeros(0, np.int8)
    at = np.concatenate(at_parts)
    val = np.concatenate(val_parts)
    order = np.argsort(at, kind="stable")
    return at[order].astype(np.int64), val[order].astype(np.int8)


def lockout(
    runs: SampledRuns, n, fresh: np.ndarray | None = None, seg_of: np.ndarray | None = None
) -> Transitions:
    """`n` is one window, or one window per recording of a joined replay (`seg_of`: each run's
    recording, `fresh`: each recording's first run)."""
    n_run = np.maximum(_per_run(n, seg_of, len(runs)), 1)

    def init(first_runs: np.ndarray) -> dict[str, np.ndarray]:
        m = len(first_runs)
        return {"free_at": np.full(m, np.iinfo(np.int64).min // 2, np.int64), "n": n_run[first_runs]}

    def step(st, v, s, length):
        q = np.maximum(s, st["free_at"])
        take = (v != st["y"]) & (q < s + length)
        st["y"][take] = v[take]
        st["free_at"][take] = q[take] + st["n"][take]
        return q[take], v[take]

    return _lockstep(runs, runs.length >= 2 * n_run, init, step, fresh)


def confirm(
    runs: SampledRuns, make, brk, fresh: np.ndarray | None = None, seg_of: np.ndarray | None = None
) -> Transitions:
    """`make` and `brk` are one pair of windows, or one pair per recording of a joined replay."""
    make_run = np.maximum(_per_run(make, seg_of, len(runs)), 0)
    brk_run = np.maximum(_per_run(brk, seg_of, len(runs)), 0)
    none = np.int64(-1)

    def init(first_runs: np.ndarray) -> dict[str, np.ndarray]:
        m = len(first_runs)
        return {"check": np.full(m, none, np.int64), "make": make_run[first_runs], "brk": brk_run[first_runs]}

    def step(st, v, s, length):
        e = s + length
        y, check = st["y"], st["check"]
        waiting_at_start = check < 0
        due = (check >= 0) & (check < e)
        accept_due = due & (v != y)
        at_due = check[accept_due]
        val_due = v[accept_due]
        y[accept_due] = v[accept_due]
        check[due] = none
        detect = waiting_at_start & (v != y)
        c = s + np.where(v == 1, st["make"], st["brk"])
        now = detect & (c < e)
        y[now] = v[now]
        later = detect & ~now
        check[later] = c[later]
        return np.concatenate((at_due, c[now])), np.concatenate((val_due, v[now]))

    return _lockstep(runs, runs.length >= np.maximum(make_run, brk_run) + 1, init, step, fresh)


def _per_run(value, seg_of: np.ndarray | None, nrun: int) -> np.ndarray:
    """A parameter given once or once per recording, spread to one value per run."""
    arr = np.asarray(value, np.int64)
    if arr.ndim == 0:
        return np.full(nrun, int(arr), np.int64)
    return arr[seg_of]


KINDS = ("lockout", "stable", "integrator", "confirm")


def replay(runs: SampledRuns, kind: str, n: int, brk: int | None = None) -> Transitions:
    """Accepted transitions of debouncer `kind` with parameter `n` (and `brk` for `confirm`)."""
    if kind == "lockout":
        return lockout(runs, max(int(n), 1))
    if kind == "stable":
        return stable(runs, n)
    if kind == "integrator":
        return integrator(runs, n)
    if kind == "confirm":
        return confirm(runs, int(n), int(n if brk is None else brk))
    raise ValueError(f"unknown debouncer {kind!r}")


def replay_many(many: list[SampledRuns], kind: str, n: int, brk: int | None = None) -> list[Transitions]:
    """`replay` on several recordings at once, one result per recording."""
    return replay_grid(many, kind, [(n, n if brk is None else brk)])[0]


JOIN_RUNS = 4_000_000  # runs stepped together at most (memory: about 100 bytes a run)


def replay_grid(
    many: list[SampledRuns], kind: str, params: list[tuple[int, int]], join_runs: int = JOIN_RUNS
) -> list[list[Transitions]]:
    """`replay` of every recording with every parameter pair `(n, brk)` (`brk` used by `confirm`):
    result[param][recording]. The state machines (`lockout`, `confirm`) step every recording and
    parameter together, so the Python loop runs once over the longest segment of all, not once per
    recording and parameter."""
    if kind not in ("lockout", "confirm"):
        return [[replay(r, kind, m, b) for r in many] for m, b in params]
    per_param = max(sum(len(r) for r in many), 1)
    chunk = max(1, join_runs // per_param)
    out: list[list[Transitions]] = []
    for lo in range(0, len(params), chunk):
        out += _replay_joined(many, kind, params[lo : lo + chunk])
    return out


def _replay_joined(
    many: list[SampledRuns], kind: str, params: list[tuple[int, int]]
) -> list[list[Transitions]]:
    jobs = [(i, r) for i in range(len(params)) for r in many]
    offsets, lo = [], 0
    for _, r in jobs:
        offsets.append(lo - int(r.start[0]))
        lo += int(r.start[-1] + r.length[-1] - r.start[0]) + 1
    bounds = np.array([o + int(r.start[0]) for o, (_, r) in zip(offsets, jobs, strict=True)] + [lo], np.int64)
    sizes = np.array([len(r) for _, r in jobs], np.int64)
    joined = SampledRuns(
        np.concatenate([r.value for _, r in jobs]),
        np.concatenate([r.start + o for (_, r), o in zip(jobs, offsets, strict=True)]),
        np.concatenate([r.length for _, r in jobs]),
        many[0].ts_ns,
    )
    fresh = np.zeros(len(joined), bool)
    fresh[np.concatenate(([0], np.cumsum(sizes)[:-1]))] = True
    seg_of = np.repeat(np.arange(len(jobs)), sizes)
    m = np.array([params[i][0] for i, _ in jobs], np.int64)
    b = np.array([params[i][1] for i, _ in jobs], np.int64)
    if kind == "lockout":
        at, val = lockout(joined, np.maximum(m, 1), fresh, seg_of)
    else:
        at, val = confirm(joined, m, b, fresh, seg_of)
    cut = np.searchsorted(at, bounds)
    flat = [(at[cut[j] : cut[j + 1]] - offsets[j], val[cut[j] : cut[j + 1]]) for j in range(len(jobs))]
    return [flat[i * len(many) : (i + 1) * len(many)] for i in range(len(params))]
