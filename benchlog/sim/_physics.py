"""Contact physics, vectorised over a batch of cycles of one unit. No I/O, no clock, no protocol.

One cycle of a unit: the coil is driven at `t_on`; after the operate time the contact first touches,
then reopens a Poisson number of times with decaying gaps (make bounce); the coil is released at
`t_off`; after the release time the contact first separates, then recloses a few times (break bounce).
Bounce grows with wear. At its Weibull-drawn life the unit fails in its drawn mode:

- `welded`: the make at the failing cycle welds; the contact never opens again;
- `missed_make`: from the failing cycle on, the contact never closes;
- `chatter`: from the failing cycle on, the contact opens briefly at random while closed.

All times are integer nanoseconds of true (simulated) time.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from benchlog.sim._config import FAILURE_MODES, Bounce, Population, Spread

EDGE = 0
DRIVE = 1

MAX_CHATTER = 12  # chatter openings per closed period at most

TRUTH_DTYPE = np.dtype(
    [
        ("channel", np.uint8),
        ("cycle", np.int64),
        ("kind", np.uint8),  # 0 make, 1 break
        ("t_drive_ns", np.int64),
        ("t_first_ns", np.int64),  # -1: the contact did not move
        ("t_settle_ns", np.int64),
        ("transit_us", np.float64),  # operate (make) or release (break) time; NaN if no movement
        ("bounce_us", np.float64),
        ("bounce_count", np.int32),
        ("first_gap_us", np.float64),  # length of the first return to the old state (NaN: none)
        ("chatter", np.int32),  # chatter openings in the closed period after this make
    ]
)


@dataclass(slots=True)
class UnitState:
    """One unit on one channel; `life` in cycles (a float), `mode` one of FAILURE_MODES."""

    channel: int
    serial: str
    population: Population
    life: float
    mode: str
    cycles_done: int = 0


def draw_unit(rng: np.random.Generator, channel: int, serial: str, pop: Population) -> UnitState:
    life = float(pop.life_scale * rng.weibull(pop.life_shape))
    modes = [m for m in FAILURE_MODES if pop.failure.get(m, 0.0) > 0]
    probs = np.array([pop.failure[m] for m in modes])
    mode = str(rng.choice(modes, p=probs / probs.sum()))
    return UnitState(channel, serial, pop, life, mode)


def _spread(rng: np.random.Generator, sp: Spread, n: int) -> np.ndarray:
    return sp.median_us * np.exp(sp.sigma * rng.standard_normal(n))


def _train(
    rng: np.random.Generator, b: Bounce, wear: np.ndarray, max_b: int, min_us: float, window_us: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Offsets (us) of each edge of a bounce train from the first transition, (K, 2*max_b + 1);
    the bounce count per cycle, (K,); the first gap (us, NaN when no bounce)."""
    k = len(wear)
    n = np.minimum(rng.poisson(b.count_mean * wear), max_b)
    i = np.arange(max_b)
    decay = b.decay**i
    gaps = b.first_gap_us * wear[:, None] * decay * np.exp(b.jitter * rng.standard_normal((k, max_b)))
    dwell = b.dwell_us * decay * np.exp(b.jitter * rng.standard_normal((k, max_b)))
    inter = np.empty((k, 2 * max_b))
    inter[:, 0::2] = np.maximum(dwell, min_us)
    inter[:, 1::2] = np.maximum(gaps, min_us)
    offsets = np.zeros((k, 2 * max_b + 1))
    np.cumsum(inter, axis=1, out=offsets[:, 1:])
    total = offsets[np.arange(k), 2 * n]
    limit = 0.6 * window_us
    squeeze = np.where(total > limit, limit / np.maximum(total, 1e-9), 1.0)
    offsets *= squeeze[:, None]
    first_gap = np.where(n > 0, inter[:, 1] * squeeze, np.nan)
    return offsets, n, first_gap


def cycles(
    rng: np.random.Generator,
    unit: UnitState,
    t_first_on_ns: int,
    on_ns: int,
    off_ns: int,
    count: int,
    max_bounces: int,
    min_pulse_us: float,
) -> tuple[tuple[np.ndarray, np.ndarray, np.ndarray], np.ndarray]:
    """Generate `count` cycles of `unit`, the first driven on at `t_first_on_ns`.

    Returns `((t_ns, kind, level), truth)`: the events in time order (kind EDGE or DRIVE, level 1 =
    closed / energised), and two TRUTH_DTYPE rows per cycle (make, break). Advances `unit.cycles_done`.
    """
    pop = unit.population
    k = count
    cyc = unit.cycles_done + np.arange(k, dtype=np.int64)
    unit.cycles_done += k
    period = on_ns + off_ns
    t_on = t_first_on_ns + np.arange(k, dtype=np.int64) * period
    t_off = t_on + on_ns
    wear = 1.0 + pop.wear_per_100k * cyc / 1e5
    on_us, off_us = on_ns / 1e3, off_ns / 1e3

    operate = np.minimum(_spread(rng, pop.operate, k), 0.4 * on_us)
    release = np.minimum(_spread(rng, pop.release, k), 0.4 * off_us)
    m_off, m_n, m_gap = _train(rng, pop.make, wear, max_bounces, min_pulse_us, on_us - operate)
    b_off, b_n, b_gap = _train(rng, pop.break_, wear, max_bounces, min_pulse_us, off_us - release)

    failing = cyc >= unit.life
    first_fail = int(np.ceil(unit.life))
    makes = np.ones(k, bool)
    breaks = np.ones(k, bool)
    if unit.mode == "welded":
        makes = cyc <= first_fail
        breaks = cyc < first_fail
    elif unit.mode == "missed_make":
        makes = ~failing
        breaks = ~failing

    m_start = t_on + np.round(operate * 1e3).astype(np.int64)
    b_start = t_off + np.round(release * 1e3).astype(np.int64)
    width = 2 * max_bounces + 1
    j = np.arange(width)
    m_t = m_start[:, None] + np.round(m_off * 1e3).astype(np.int64)
    b_t = b_start[:, None] + np.round(b_off * 1e3).astype(np.int64)
    m_valid = (j[None, :] <= 2 * m_n[:, None]) & makes[:, None]
    b_valid = (j[None, :] <= 2 * b_n[:, None]) & breaks[:, None]
    m_level = np.broadcast_to((j % 2 == 0).astype(np.uint8), (k, width))
    b_level = np.broadcast_to((j % 2 == 1).astype(np.uint8), (k, width))
    m_settle = m_t[np.arange(k), 2 * m_n]
    b_settle = b_t[np.arange(k), 2 * b_n]

    # chatter: brief openings while closed, between make settling and the break's first separation
    chat_on = failing & (unit.mode == "chatter") & makes & breaks
    lo = m_settle + 5_000
    hi = b_start - 5_000
    span_s = np.maximum(hi - lo, 0) / 1e9
    c_n = np.where(chat_on, np.minimum(rng.poisson(pop.chatter_rate_hz * span_s), MAX_CHATTER), 0)
    c_pos = np.sort(rng.random((k, MAX_CHATTER)), axis=1)
    c_at = lo[:, None] + (c_pos * np.maximum(hi - lo, 0)[:, None]).astype(np.int64)
    nxt = np.concatenate([c_at[:, 1:], hi[:, None]], axis=1)
    c_len = _spread(rng, pop.chatter_open, k * MAX_CHATTER).reshape(k, MAX_CHATTER) * 1e3
    c_len = np.clip(c_len, min_pulse_us * 1e3, np.maximum(0.5 * (nxt - c_at), 0)).astype(np.int64)
    c_valid1 = (np.arange(MAX_CHATTER)[None, :] < c_n[:, None]) & (c_len >= min_pulse_us * 1e3)
    c_t = np.stack([c_at, c_at + c_len], axis=2).reshape(k, 2 * MAX_CHATTER)
    c_valid = np.repeat(c_valid1, 2, axis=1)
    c_level = np.broadcast_to(np.tile(np.array([0, 1], np.uint8), MAX_CHATTER), (k, 2 * MAX_CHATTER))

    # assemble each cycle's slots in time order: drive on, make, chatter, drive off, break
    ones = np.ones((k, 1), bool)
    t = np.concatenate([t_on[:, None], m_t, c_t, t_off[:, None], b_t], axis=1)
    valid = np.concatenate([ones, m_valid, c_valid, ones, b_valid], axis=1)
    level = np.concatenate(
        [np.ones((k, 1), np.uint8), m_level, c_level, np.zeros((k, 1), np.uint8), b_level], axis=1
    )
    kind = np.zeros(t.shape, np.uint8)
    kind[:, 0] = DRIVE
    kind[:, 1 + width + 2 * MAX_CHATTER] = DRIVE
    sel = valid.ravel()
    t_flat, kind_flat, level_flat = t.ravel()[sel], kind.ravel()[sel], level.ravel()[sel]
    order = np.argsort(t_flat, kind="stable")  # chatter and drive-off can interleave
    events = (t_flat[order], kind_flat[order], level_flat[order])

    truth = np.zeros(2 * k, TRUTH_DTYPE)
    mk, br = truth[0::2], truth[1::2]
    for rows, kind_code, drive, start, settle, transit, n, gap, moved in (
        (mk, 0, t_on, m_start, m_settle, operate, m_n, m_gap, makes),
        (br, 1, t_off, b_start, b_settle, release, b_n, b_gap, breaks),
    ):
        rows["channel"] = unit.channel
        rows["cycle"] = cyc
        rows["kind"] = kind_code
        rows["t_drive_ns"] = drive
        rows["t_first_ns"] = np.where(moved, start, -1)
        rows["t_settle_ns"] = np.where(moved, settle, -1)
        rows["transit_us"] = np.where(moved, transit, np.nan)
        rows["bounce_us"] = np.where(moved, (settle - start) / 1e3, np.nan)
        rows["bounce_count"] = np.where(moved, n, 0)
        rows["first_gap_us"] = np.where(moved, gap, np.nan)
    mk["chatter"] = c_n
    return events, truth
