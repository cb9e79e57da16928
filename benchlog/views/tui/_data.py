"""What the screens show, read from the store's rollups (never a scan of the actuations).

These functions run in worker threads and return plain frozen dataclasses; nothing here imports
Textual. Everything a refresh shows comes from `runs()`, `run_units()`, `incidents()`, `units()`,
`parts()` and `trend()`; only the histogram reads actuations, over a bounded span of cycles.

Statistics made from rollup windows (each window keeps count, p50, p95 and max of a metric):

- **latest**: the last window as stored.
- **rolling**: the last `ROLLING_WINDOWS` windows: median of their p50, worst of their p95, max of
  their max. The verdict is judged on the rolling figures (the unit's present condition); the
  formal verdict over the whole life belongs to the qualification statistics.
- **chatter events**: the sum over windows of each window's total (`sum`), exact. Windows written
  before the store kept totals (revision 0003) have a NaN sum; for those the window's largest
  per-actuation count stands in, a lower bound (exact while at most one actuation of the window
  chattered).
- **drift**: `benchlog.analysis.drift` over the windows' p95 (coarsened to at most `DRIFT_POINTS`
  points by the remedian, `benchlog.analysis.coarse_windows`), baseline from the first windows, projection to
  the spec limit by Theil-Sen. The baseline is the first quarter of the windows (5 to 20). A unit is
  flagged DRIFT by `DriftReport.confirmed`: a chart signal, a rising trend (Kendall's tau) and a
  crossing within the spec's life (docs/metrics.md gives the flag's measured detection and false
  alarms); a unit past its limit says since when, a failed one gets no projection.
"""

from __future__ import annotations

import math
import time
import tomllib
from dataclasses import dataclass, replace

import numpy as np

from benchlog.analysis import (
    BREAK,
    DRIFT_POINTS,
    FAIL,
    MAKE,
    MARGINAL,
    METRICS,
    NO_VERDICT,
    PASS,
    PartSpec,
    coarse_windows,
    drift_limit,
    judge_drift,
    parse_spec,
)
from benchlog.errors import BenchlogError
from benchlog.store import FAILED, IncidentInfo, PartInfo, RunInfo, Trend, UnitInfo
from benchlog.views._times import failure_time_text

ROLLING_WINDOWS = 10
LINK_KINDS = ("disconnect",)  # incidents that mean the link to the sampler was down

VERDICT_LABEL = {PASS: "PASS", MARGINAL: "MARGINAL", FAIL: "FAIL", NO_VERDICT: "NO DATA"}
NO_SPEC = 254
VERDICT_LABEL[NO_SPEC] = "NO SPEC"

# what the dashboard charts: key -> (words, rollup column, kind)
CHART_METRICS: dict[str, tuple[str, str, int]] = {
    "make_bounce": ("make bounce", "bounce_us", MAKE),
    "break_bounce": ("break bounce", "bounce_us", BREAK),
    "operate_time": ("operate time", "transit_us", MAKE),
    "release_time": ("release time", "transit_us", BREAK),
    "make_longest_gap": ("make longest gap", "longest_gap_us", MAKE),
    "break_longest_gap": ("break longest gap", "longest_gap_us", BREAK),
    "make_bounce_count": ("make bounce count", "bounce_count", MAKE),
    "break_bounce_count": ("break bounce count", "bounce_count", BREAK),
    "chatter_make": ("chatter after make", "chatter", MAKE),
    "chatter_break": ("chatter after break", "chatter", BREAK),
}
_SELECTOR_KIND = {"make": MAKE, "operate": MAKE, "break": BREAK, "release": BREAK}
# the per-unit table's metrics (the others are on the history screen)
TABLE_METRICS = (
    "make_bounce",
    "break_bounce",
    "operate_time",
    "release_time",
    "chatter_make",
    "chatter_break",
)


# -- spec --------------------------------------------------------------------------------------------
def part_spec(part: PartInfo | None) -> PartSpec | None:
    """The part's spec as stored with it (TOML text, else its parsed form), or None."""
    if part is None:
        return None
    try:
        if part.spec_toml:
            return parse_spec(tomllib.loads(part.spec_toml), f"spec of {part.part_number}")
        if part.spec:
            return parse_spec(part.spec, f"spec of {part.part_number}")
    except (BenchlogError, tomllib.TOMLDecodeError, TypeError, ValueError):
        return None
    return None


def limit_for(spec: PartSpec | None, metric_key: str):
    """(max value, rollup statistic name, percentile) of the spec limit on a chart metric, or None."""
    if metric_key not in METRICS:
        return None
    return drift_limit(spec, metric_key)


def _stat_for(percentile: float) -> str:
    if percentile >= 100:
        return "max"
    return "p95" if percentile >= 75 else "p50"


# -- figures from rollups ----------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class Figures:
    """One metric of one unit: latest window and rolling span (NaN when no data)."""

    latest_p50: float = math.nan
    latest_p95: float = math.nan
    latest_max: float = math.nan
    p50: float = math.nan  # rolling
    p95: float = math.nan
    max: float = math.nan
    windows: int = 0
    cycle_hi: int = -1


def figures(trend: Trend, rolling: int = ROLLING_WINDOWS) -> Figures:
    ok = trend.count > 0
    if not ok.any():
        return Figures()
    idx = np.flatnonzero(ok)
    last = idx[-1]
    span = idx[-rolling:]
    return Figures(
        float(trend.p50[last]),
        float(trend.p95[last]),
        float(trend.max[last]),
        float(np.nanmedian(trend.p50[span])),
        float(np.nanmax(trend.p95[span])),
        float(np.nanmax(trend.max[span])),
        int(len(idx)),
        int(trend.cycle_hi[last]),
    )


def chatter_events(trend: Trend, rolling: int | None = None) -> int:
    """Chatter events (see the module docstring); over the last `rolling` windows."""
    has = trend.count > 0
    total = trend.sum[has]
    per_window = np.where(np.isnan(total), np.nan_to_num(trend.max[has], nan=0.0), total)
    if rolling is not None:
        per_window = per_window[-rolling:]
    return int(round(float(per_window.sum())))


def windows_of(trend: Trend, stat: str = "p95", points: int = DRIFT_POINTS) -> np.ndarray:
    """The trend as analysis windows (WINDOW_DTYPE), coarsened to at most `points` windows."""
    return coarse_windows(trend.cycle_lo, trend.cycle_hi, trend.count, getattr(trend, stat), points)


@dataclass(frozen=True, slots=True)
class DriftFlag:
    metric: str  # chart metric key
    words: str
    signalled: bool
    first_signal_cycle: int | None
    crossing_cycle: float | None  # projected cycle at which the limit is reached (None: not reached)
    crossing_low: float | None
    crossing_high: float | None
    baseline: float
    limit: float | None
    last_cycle: int  # the last cycle the trend covers
    over_since: int | None = None  # the statistic has stayed above the limit since this cycle
    failed_at: int | None = None  # the unit failed: no projection
    evidence: str = ""  # the flag's evidence in words (chart signal, rising trend)

    @property
    def past_limit(self) -> bool:
        return self.over_since is not None

    @property
    def short(self) -> str:
        if not self.signalled:
            return ""
        head = f"DRIFT {self.words}"
        if self.past_limit:
            return f"{head}, past the limit since {cycles_text(self.over_since)}"
        if self.failed_at is not None:
            return head
        if self.crossing_cycle is not None:
            return f"{head} -> limit ~{cycles_text(self.crossing_cycle)}"
        return head


def drift_of(
    trend: Trend, metric: str, spec: PartSpec | None, failed_at: int | None = None
) -> tuple[DriftFlag | None, object | None]:
    """(flag, DriftReport) for one metric's trend, or (None, None) with too few windows. `failed_at`:
    the unit failed at this cycle (its flag then carries no projection)."""
    lim = limit_for(spec, metric)
    stat = lim[1] if lim else "p95"
    w = windows_of(trend, stat)
    life = spec.life.min_cycles if spec is not None and spec.life is not None else None
    rep = judge_drift(w, lim[0] if lim else None, life, failed_at)
    if rep is None:
        return None, None
    p = rep.projection
    flag = DriftFlag(
        metric,
        CHART_METRICS[metric][0],
        rep.confirmed,
        rep.first_signal_cycle,
        None if p is None else p.crossing_cycle,
        None if p is None else p.crossing_low,
        None if p is None else p.crossing_high,
        rep.baseline.mean,
        lim[0] if lim else None,
        int(w["cycle_end"][-1]) - 1,
        rep.over_since,
        failed_at,
        "; ".join(rep.evidence),
    )
    return flag, rep


# -- the runs list -----------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class Outage:
    """The link outages of a run: how many, the longest, and whether one is still open."""

    count: int
    longest_s: float
    total_s: float
    last_detail: str


@dataclass(frozen=True, slots=True)
class RunRow:
    run: RunInfo
    state: str  # live / interrupted / ended
    outage: Outage | None
    incident_kinds: dict[str, int]

    @property
    def how(self) -> str:
        if self.state == "live":
            return "recording"
        if self.state == "interrupted":
            return "resumable"
        return END_WORDS.get(self.run.end_reason or "", self.run.end_reason or "ended")


END_WORDS = {
    "target": "target met",
    "all_failed": "all failed",
    "stopped": "stopped",
    "port_lost": "port lost",
    "store_error": "db refused",
    "error": "error",
}


@dataclass(frozen=True, slots=True)
class Overview:
    runs: list[RunRow]
    benches: int
    read_s: float


def outage_of(incidents: list[IncidentInfo]) -> Outage | None:
    link = [i for i in incidents if i.kind in LINK_KINDS]
    if not link:
        return None
    d = [i.duration_s for i in link]
    return Outage(len(link), max(d), sum(d), link[-1].detail)


def read_overview(store, limit: int = 50) -> Overview:
    t0 = time.perf_counter()
    runs = store.runs(limit=limit)
    rows = []
    for r in runs:
        kinds: dict[str, int] = {}
        outage = None
        if r.incidents:
            incs = store.incidents(r.id)
            for i in incs:
                kinds[i.kind] = kinds.get(i.kind, 0) + 1
            outage = outage_of(incs)
        rows.append(RunRow(r, r.state, outage, kinds))
    benches = len({r.bench_id for r in runs})
    return Overview(rows, benches, time.perf_counter() - t0)


# -- the units of a run ------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class UnitRow:
    channel: int
    unit: UnitInfo
    run_cycles: int
    figures: dict[str, Figures]  # chart metric key -> figures
    chatter: int  # events over the life (a lower bound where old windows have no sum)
    verdict: int
    reasons: tuple[str, ...]
    drift: tuple[DriftFlag, ...]

    @property
    def verdict_label(self) -> str:
        return VERDICT_LABEL.get(self.verdict, "?")

    @property
    def drifting(self) -> bool:
        return any(d.signalled for d in self.drift)

    @property
    def life_text(self) -> str:
        u = self.unit
        if u.status == FAILED:
            mode = (u.failure_mode or "").replace("_", " ").split(" ")[0]
            return f"FAILED {cycles_text(u.failed_at_cycle or u.cycles)} {mode}".rstrip()
        return u.status.upper()

    @property
    def life_words(self) -> str:
        u = self.unit
        if u.status == FAILED:
            mode = (u.failure_mode or "unknown mode").replace("_", " ")
            return f"failed at cycle {u.failed_at_cycle or u.cycles:,}: {mode}, {failure_time_text(u)}"
        return f"{u.status}, {u.cycles:,} cycles"

    def search_text(self) -> str:
        u = self.unit
        words = [u.serial, u.part_number, u.lot, u.supplier, u.status, self.verdict_label.lower()]
        if self.drifting:
            words.append("drift")
        if u.failure_mode:
            words.append(u.failure_mode)
        return " ".join(words).lower()


@dataclass(frozen=True, slots=True)
class RunDetail:
    run: RunInfo
    units: list[UnitRow]
    outage: Outage | None
    incidents: list[IncidentInfo]
    read_s: float
    missing: int = 0  # trends not read yet: the figures fill in on the next reads

    @property
    def complete(self) -> bool:
        return self.missing == 0


def judge_unit(unit: UnitInfo, figs: dict[str, Figures], chatter_recent: int, window: int, spec):
    """(verdict, reasons) from the rolling figures against the spec; a failed unit fails."""
    reasons: list[str] = []
    if unit.status == FAILED:
        mode = (unit.failure_mode or "failure").replace("_", " ")
        reasons.append(f"failed at cycle {unit.failed_at_cycle:,} ({mode})" if unit.failed_at_cycle else mode)
    if spec is None:
        return (FAIL if reasons else NO_SPEC), tuple(reasons or ["the part has no spec in the store"])
    verdict = FAIL if reasons else PASS
    any_data = False
    for lim in spec.limits:
        key = lim.metric
        if key not in figs:
            continue
        f = figs[key]
        stat = {"max": f.max, "p95": f.p95, "p50": f.p50}[_stat_for(lim.percentile)]
        if math.isnan(stat):
            continue
        any_data = True
        band = spec.marginal_band if lim.marginal_band is None else lim.marginal_band
        label = "max" if lim.percentile >= 100 else f"p{lim.percentile:g}"
        text = f"{lim.words} {label} {value_text(stat, key)} (limit {value_text(lim.max_value, key)})"
        if stat > lim.max_value:
            verdict = FAIL
            reasons.append(text + " over")
        elif stat > lim.max_value * (1 - band):
            verdict = max(verdict, MARGINAL)
            reasons.append(text + " within the marginal band")
    if spec.chatter is not None and window > 0:
        span = ROLLING_WINDOWS * window
        allowed = spec.chatter.max_events * span / spec.chatter.per_cycles
        if chatter_recent > allowed:
            verdict = FAIL
            reasons.append(
                f"chatter {chatter_recent} events in {span:,} cycles "
                f"(limit {spec.chatter.max_events} per {spec.chatter.per_cycles:,})"
            )
    if not any_data and verdict == PASS:
        return NO_VERDICT, ("no complete actuations yet",)
    return verdict, tuple(reasons)


def _empty_trend(unit_id: int, column: str, kind: int) -> Trend:
    z = np.zeros(0, np.int64)
    f = np.zeros(0, np.float64)
    return Trend(unit_id, column, kind, z, z, z, f, f, f, f)


class TrendCache:
    """Trends per (unit, metric), re-read only when the unit's latest rollup window moved on, at most
    every `min_age_s` seconds, and within a time budget per refresh: a trend due for a re-read past
    `budget_s` is served as it was and re-read on a later refresh, so a refresh over long lives stays
    short however many units got a new window at once. Trends never read yet are read up to
    `first_budget_s` per refresh; past it they are left out (`missing`), the screen shows what it has
    and reads again at once, so a run with long lives fills in batch by batch."""

    def __init__(self, min_age_s: float = 5.0, budget_s: float = 0.04, first_budget_s: float = 0.25) -> None:
        self.min_age_s = min_age_s
        self.budget_s = budget_s
        self.first_budget_s = first_budget_s
        self._data: dict[tuple[int, str], tuple[int, float, Trend]] = {}
        self._derived: dict[tuple, tuple[Trend, object]] = {}
        self.layouts: dict[int, tuple[float, list]] = {}
        self._spent = 0.0
        self.deferred = 0  # re-reads put off in the current refresh
        self.missing = 0  # trends not read yet (left for the next refresh)

    @classmethod
    def complete(cls) -> TrendCache:
        """A cache without time budgets, for a one-off read (a printed summary, a report): every trend
        is read however long the store takes, so what is printed never depends on the machine's load."""
        return cls(min_age_s=0.0, budget_s=math.inf, first_budget_s=math.inf)

    def begin(self) -> None:
        """A new refresh: its budgets start afresh."""
        self._spent = 0.0
        self.deferred = 0
        self.missing = 0

    def get(self, store, unit_id: int, key: str, latest_hi: int, now: float | None = None) -> Trend:
        now = time.monotonic() if now is None else now
        hit = self._data.get((unit_id, key))
        _, column, kind = CHART_METRICS[key]
        if hit is not None:
            if hit[0] == latest_hi or now - hit[1] < self.min_age_s:
                return hit[2]
            if self._spent > 0 and self._spent >= self.budget_s:  # one read per refresh at least
                self.deferred += 1
                return hit[2]
        elif self._spent > 0 and self._spent >= self.first_budget_s:
            self.missing += 1
            return _empty_trend(unit_id, column, kind)
        t0 = time.perf_counter()
        t = store.trend(unit_id, column, kind=kind)
        self._spent += time.perf_counter() - t0
        self._data[(unit_id, key)] = (latest_hi, now, t)
        return t

    def derived(self, key: tuple, trend: Trend, make):
        """`make(trend)`, computed again only when the trend was re-read (figures, drift charts)."""
        hit = self._derived.get(key)
        if hit is not None and hit[0] is trend:
            return hit[1]
        value = make(trend)
        self._derived[key] = (trend, value)
        return value


LAYOUT_AGE_S = 30.0  # a live run's channel layout (and per-run cycle counts) is re-read this often


@dataclass(frozen=True, slots=True)
class _Seat:
    channel: int
    unit_id: int
    cycle_base: int
    cycles_done: int  # as of the last run_units() read


def _layout(store, run: RunInfo, cache: TrendCache) -> list[_Seat]:
    """The run's channels and units. `run_units()` scans every rollup of the run for its latest
    windows (about 100 ms over 10 M actuations), so it is read when a run is opened, and for a live
    run again every LAYOUT_AGE_S; in between, life status and cycles come from `units(ids=...)`."""
    now = time.monotonic()
    hit = cache.layouts.get(run.id)
    if hit is None or len(hit[1]) != run.units or (run.state != "ended" and now - hit[0] > LAYOUT_AGE_S):
        seats = [
            _Seat(ru.channel, ru.unit.id, ru.cycle_base, ru.cycles_done) for ru in store.run_units(run.id)
        ]
        cache.layouts[run.id] = (now, seats)
        return seats
    return hit[1]


def read_run(store, run_id: int, cache: TrendCache | None = None, specs: dict | None = None) -> RunDetail:
    t0 = time.perf_counter()
    cache = cache or TrendCache.complete()
    cache.begin()
    run = store.run(run_id)
    seats = _layout(store, run, cache)
    units = {u.id: u for u in store.units(ids=[s.unit_id for s in seats])} if seats else {}
    incidents = store.incidents(run_id) if run.incidents else []
    if specs is None:
        specs = {p.id: part_spec(p) for p in store.parts()}
    rows = []
    for seat in seats:
        unit = units.get(seat.unit_id)
        if unit is None:
            continue
        # a live run's units are in no later run: their life cycles less the base are this run's
        done = (
            max(seat.cycles_done, unit.cycles - seat.cycle_base) if run.state != "ended" else seat.cycles_done
        )
        rows.append(_unit_row(store, seat.channel, unit, done, run, cache, specs.get(unit.part_id)))
    return RunDetail(run, rows, outage_of(incidents), incidents, time.perf_counter() - t0, cache.missing)


def _spec_key(spec) -> tuple | None:
    return None if spec is None else (spec.number, spec.marginal_band, spec.limits)


def _failed_at(unit: UnitInfo) -> int | None:
    return (unit.failed_at_cycle or unit.cycles) if unit.status == FAILED else None


def _unit_row(store, channel: int, unit: UnitInfo, run_cycles: int, run: RunInfo, cache: TrendCache, spec):
    figs: dict[str, Figures] = {}
    trends: dict[str, Trend] = {}
    uid = unit.id
    window_no = unit.cycles // max(1, run.rollup_window)  # moves on when a new window can be complete
    for key in TABLE_METRICS:
        t = cache.get(store, uid, key, window_no)
        trends[key] = t
        figs[key] = cache.derived((uid, key, "figures"), t, figures)
    counts = [
        cache.derived(
            (uid, k, "chatter"), trends[k], lambda t: (chatter_events(t), chatter_events(t, ROLLING_WINDOWS))
        )
        for k in ("chatter_make", "chatter_break")
    ]
    chatter = counts[0][0] + counts[1][0]
    recent = counts[0][1] + counts[1][1]
    verdict, reasons = judge_unit(unit, figs, recent, run.rollup_window, spec)
    flags = []
    failed = _failed_at(unit)
    for key in ("make_bounce", "break_bounce", "operate_time", "release_time"):
        flag, _ = cache.derived(
            (uid, key, "drift", _spec_key(spec), failed),
            trends[key],
            lambda t, k=key: drift_of(t, k, spec, failed),
        )
        if flag is not None:
            flags.append(flag)
    return UnitRow(channel, unit, run_cycles, figs, chatter, verdict, reasons, tuple(flags))


# -- one unit's history ------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class History:
    unit: UnitInfo
    metric: str
    trend: Trend
    limit: float | None
    limit_stat: str
    flag: DriftFlag | None
    report: object | None  # DriftReport
    signal_cycles: np.ndarray  # window end cycles where a chart signalled
    span: tuple[int, int]  # histogram cycles (inclusive)
    values: np.ndarray  # metric values of the span's complete actuations
    read_s: float


def within_life(trend, failed_at: int):
    """The windows of a failed unit's trend up to its failure: what a recorder wrote of its channel
    after that (a welded contact, a stuck one) is not the unit's life."""
    keep = trend.cycle_lo <= failed_at
    if keep.all():
        return trend
    fields = ("cycle_lo", "cycle_hi", "count", "p50", "p95", "max", "sum")
    return replace(trend, **{f: getattr(trend, f)[keep] for f in fields})


def read_history(store, unit_id: int, metric: str, span: tuple[int, int] | None, span_cycles: int = 1000):
    """A unit's trend of `metric`, its drift, and the raw values over `span` (default: the last
    `span_cycles` cycles) for the histogram."""
    t0 = time.perf_counter()
    units = store.units(ids=[unit_id])
    if not units:
        from benchlog.errors import DataError

        raise DataError(f"no unit {unit_id} in this database")
    unit = units[0]
    spec = part_spec(next((p for p in store.parts() if p.id == unit.part_id), None))
    words, column, kind = CHART_METRICS[metric]
    trend = store.trend(unit_id, column, kind=kind)
    if unit.failed_at_cycle is not None:
        trend = within_life(trend, int(unit.failed_at_cycle))
    lim = limit_for(spec, metric)
    flag, rep = drift_of(trend, metric, spec, _failed_at(unit))
    sig = np.zeros(0, np.int64)
    if rep is not None:
        hit = rep.ewma_signal | rep.cusum_signal
        sig = rep.windows["cycle_end"][hit]
    last = int(trend.cycle_hi.max()) if len(trend) else -1
    if unit.failed_at_cycle is not None and last >= 0:
        last = min(last, int(unit.failed_at_cycle))
    if span is None:
        span = (max(0, last - span_cycles + 1), max(last, 0))
    values = np.zeros(0)
    if last >= 0:
        acts = store.actuations(units=[unit_id], kind=kind, cycles=span)
        from benchlog.analysis import INCOMPLETE, NO_CHANGE

        ok = (acts["flags"] & (INCOMPLETE | NO_CHANGE)) == 0
        values = acts[column][ok].astype(np.float64)
        values = values[~np.isnan(values)]
    return History(
        unit,
        metric,
        trend,
        lim[0] if lim else None,
        lim[1] if lim else "p95",
        flag,
        rep,
        sig,
        span,
        values,
        time.perf_counter() - t0,
    )


# -- population ---------------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class Group:
    kind: str  # "all" (every unit, by part and lot) | "part" | "lot"
    key: int
    label: str

    @property
    def title(self) -> str:
        return "all parts" if self.kind == "all" else f"{self.kind} {self.label}"


@dataclass(frozen=True, slots=True)
class PopUnit:
    unit: UnitInfo
    figures: dict[str, Figures]
    verdict: int


@dataclass(frozen=True, slots=True)
class Population:
    groups: list[Group]
    group: Group | None
    units: list[PopUnit]
    limits: dict[tuple[int, str], float | None]  # (part id, metric) -> spec limit
    read_s: float
    missing: int = 0

    @property
    def complete(self) -> bool:
        return self.missing == 0


POP_METRICS = ("make_bounce", "break_bounce", "operate_time")


def read_population(store, group: Group | None, cache: TrendCache | None = None) -> Population:
    t0 = time.perf_counter()
    cache = cache or TrendCache.complete()
    cache.begin()
    parts = store.parts()
    groups = [Group("all", 0, "parts")] if len(parts) > 1 else []
    groups += [Group("part", p.id, p.part_number) for p in parts]
    groups += [Group("lot", lot.id, f"{lot.part_number}/{lot.code}") for lot in store.lots()]
    if group is None and groups:
        group = groups[0]
    units: list[PopUnit] = []
    limits: dict[str, float | None] = {}
    if group is not None:
        if group.kind == "all":
            found = store.units()
        elif group.kind == "part":
            found = store.units(part=group.key)
        else:
            found = store.units(lot=group.key)
        found.sort(key=lambda u: (u.part_number, u.lot, u.serial))
        specs = {p.id: part_spec(p) for p in parts}
        for u in found:
            figs = {}
            for key in POP_METRICS:
                _, column, kind = CHART_METRICS[key]
                t = cache.get(store, u.id, key, u.cycles)
                figs[key] = figures(t)
            spec = specs.get(u.part_id)
            verdict, _ = judge_unit(u, figs, 0, 0, spec)
            units.append(PopUnit(u, figs, verdict))
            for key in POP_METRICS:
                lim = limit_for(spec, key)
                limits.setdefault((u.part_id, key), lim[0] if lim else None)
    return Population(groups, group, units, limits, time.perf_counter() - t0, cache.missing)


# -- text ---------------------------------------------------------------------------------------------
def cycles_text(c: float | int | None) -> str:
    if c is None or (isinstance(c, float) and math.isnan(c)):
        return "-"
    c = float(c)
    if abs(c) >= 10_000_000:
        return f"{c / 1e6:.0f}M"
    if abs(c) >= 1_000_000:
        return f"{c / 1e6:.1f}M"
    if abs(c) >= 100_000:
        return f"{c / 1e3:.0f}k"
    if abs(c) >= 10_000:
        return f"{c / 1e3:.1f}k"
    return f"{c:,.0f}"


def value_text(v: float, metric: str = "make_bounce") -> str:
    """A metric value for a table cell: times in ms (they are stored in us) with two decimals below
    10 ms and one above, counts as numbers."""
    if v is None or math.isnan(v):
        return "-"
    if "count" in metric or metric.startswith("chatter"):
        return f"{v:.0f}"
    ms = v / 1000
    return f"{ms:.2f}" if abs(ms) < 10 else f"{ms:.1f}"


def duration_text(s: float | None) -> str:
    if s is None or math.isnan(s):
        return "-"
    s = float(s)
    if s < 60:
        return f"{s:.1f} s" if s < 10 else f"{s:.0f} s"
    if s < 3600:
        return f"{int(s // 60)} min {int(s % 60):02d} s"
    if s < 86400 * 2:
        return f"{int(s // 3600)} h {int(s % 3600 // 60):02d} min"
    return f"{s / 86400:.1f} d"


__all__ = [
    "CHART_METRICS",
    "DriftFlag",
    "Figures",
    "Group",
    "History",
    "Outage",
    "Overview",
    "PopUnit",
    "Population",
    "RunDetail",
    "RunRow",
    "TrendCache",
    "UnitRow",
]
