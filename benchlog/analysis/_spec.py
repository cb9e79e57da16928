"""Part specs (TOML, docs/spec.md) and verdicts against them, per actuation and per unit."""

from __future__ import annotations

import math
import tomllib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from benchlog.analysis._settings import AnalysisSettings
from benchlog.analysis._types import (
    BREAK,
    FAIL,
    INCOMPLETE,
    MAKE,
    MARGINAL,
    MISSED,
    NO_CHANGE,
    NO_VERDICT,
    PASS,
    STUCK,
)
from benchlog.errors import SpecError

VERDICT_NAMES = {PASS: "pass", MARGINAL: "marginal", FAIL: "fail", NO_VERDICT: "none"}

# limit name -> (column, selector, words). Selectors pick the rows a limit applies to.
METRICS: dict[str, tuple[str, str, str]] = {
    "make_bounce": ("bounce_us", "make", "make bounce"),
    "break_bounce": ("bounce_us", "break", "break bounce"),
    "operate_time": ("transit_us", "operate", "operate time"),
    "release_time": ("transit_us", "release", "release time"),
    "make_longest_gap": ("longest_gap_us", "make", "make longest bounce gap"),
    "break_longest_gap": ("longest_gap_us", "break", "break longest bounce gap"),
    "make_bounce_count": ("bounce_count", "make", "make bounce count"),
    "break_bounce_count": ("bounce_count", "break", "break bounce count"),
}
_COUNT_METRICS = {"make_bounce_count", "break_bounce_count"}


@dataclass(frozen=True, slots=True)
class Limit:
    """Upper limit on one metric: `max_value` in us (or a count), judged at `percentile` per unit."""

    metric: str
    max_value: float
    percentile: float = 100.0
    marginal_band: float | None = None  # None: the spec's band

    @property
    def words(self) -> str:
        return METRICS[self.metric][2]


@dataclass(frozen=True, slots=True)
class ChatterLimit:
    max_events: int
    per_cycles: int


@dataclass(frozen=True, slots=True)
class LifeRequirement:
    min_cycles: int
    confidence: float


@dataclass(frozen=True, slots=True)
class PartSpec:
    number: str
    supplier: str = ""
    description: str = ""
    settle_ns: int = AnalysisSettings().settle_ns
    chatter_threshold_ns: int = AnalysisSettings().chatter_threshold_ns
    glitch_floor_ns: int = 0
    marginal_band: float = 0.1
    limits: tuple[Limit, ...] = ()
    chatter: ChatterLimit | None = None
    max_missed: int = 0
    life: LifeRequirement | None = None
    source: str = ""
    extra: dict[str, Any] = field(default_factory=dict)

    def limit(self, metric: str) -> Limit | None:
        return next((lim for lim in self.limits if lim.metric == metric), None)

    def settings(self, base: AnalysisSettings | None = None) -> AnalysisSettings:
        """Analysis settings with the spec's settle window, chatter threshold and glitch floor."""
        base = base or AnalysisSettings()
        return base.with_(
            settle_ns=self.settle_ns,
            chatter_threshold_ns=self.chatter_threshold_ns,
            glitch_floor_ns=self.glitch_floor_ns,
        )


# -- loading ----------------------------------------------------------------------------------------


# [conditions]: the test conditions a report states (free text) and `operation`, the part's own word
# for one operating cycle ("plunger stroke", "coil cycle") used in failure rates.
CONDITION_KEYS = ("operation", "profile", "load", "coil_voltage", "ambient")


# Physically sensible ranges of the settings (common practice, no source: mechanical contacts bounce
# for microseconds to tens of milliseconds, relays operate in milliseconds to a few hundred; a bench
# cycles at most some tens of times a second). A value outside is a typing slip, not a part.
SETTLE_MAX_US = 1_000_000.0  # a contact quiet for a second has settled
CHATTER_THRESHOLD_MAX_US = 100_000.0  # an opening of 100 ms is a missed make, not chatter
GLITCH_FLOOR_MAX_US = 1_000.0  # a floor above 1 ms would hide real bounce
LIMIT_MAX_US = 10_000_000.0  # 10 s: no bounce, operate or release time of a contact is longer
BOUNCE_COUNT_MAX = 100_000
COUNT_MAX = 1_000_000_000
LIFE_MAX_CYCLES = 10**12  # a billion-cycle life at ten cycles a second is three years


class _Reader:
    def __init__(self, path: str) -> None:
        self.path = path

    def fail(self, key: str, expected: str, got: object) -> SpecError:
        shown = repr(got)
        shown = shown if len(shown) <= 40 else shown[:37] + "..."
        return SpecError(f"{self.path}: {key}: expected {expected}, got {shown}")

    def table(self, doc: dict, key: str, allowed: set[str], required: bool = False) -> dict | None:
        value = doc.get(key.split(".")[-1])
        if value is None:
            if required:
                raise SpecError(f"{self.path}: [{key}]: expected a table, but it is missing")
            return None
        if not isinstance(value, dict):
            raise self.fail(key, "a table", value)
        unknown = sorted(set(value) - allowed)
        if unknown:
            raise SpecError(
                f"{self.path}: {key}.{unknown[0]}: unknown key (expected one of {', '.join(sorted(allowed))})"
            )
        return value

    def number(self, tbl: dict, prefix: str, key: str, lo: float, hi: float = math.inf, lo_open=True):
        value = tbl[key]
        if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
            raise self.fail(f"{prefix}.{key}", "a number", value)
        if (value <= lo if lo_open else value < lo) or value > hi:
            bound = f"> {lo}" if lo_open else f">= {lo}"
            rng = bound if hi == math.inf else f"{bound} and <= {hi}"
            raise self.fail(f"{prefix}.{key}", f"a number {rng}", value)
        return float(value)

    def integer(self, tbl: dict, prefix: str, key: str, lo: int, hi: int) -> int:
        value = tbl[key]
        if isinstance(value, bool) or not isinstance(value, int) or not lo <= value <= hi:
            raise self.fail(f"{prefix}.{key}", f"a whole number from {lo:,} to {hi:,}", value)
        return int(value)

    def text(self, tbl: dict, prefix: str, key: str) -> str:
        value = tbl.get(key, "")
        if not isinstance(value, str):
            raise self.fail(f"{prefix}.{key}", "a string", value)
        return value

    def duration_us(
        self, tbl: dict, prefix: str, stem: str, required: bool, hi_us: float, lo_open: bool = True
    ) -> float | None:
        """`<stem>_ms` or `<stem>_us` (exactly one), in microseconds, > 0 (>= 0 unless `lo_open`) and
        at most `hi_us` (the error states the range in the key's own unit)."""
        keys = [k for k in (f"{stem}_ms", f"{stem}_us") if k in tbl]
        if len(keys) > 1:
            raise SpecError(f"{self.path}: {prefix}: expected one of {stem}_ms or {stem}_us, not both")
        if not keys:
            if required:
                raise SpecError(f"{self.path}: {prefix}.{stem}_ms: expected a duration, but it is missing")
            return None
        in_ms = keys[0].endswith("_ms")
        value = self.number(tbl, prefix, keys[0], 0.0, hi_us / 1000.0 if in_ms else hi_us, lo_open=lo_open)
        return value * 1000.0 if in_ms else value


def shipped_specs() -> list[str]:
    """Part numbers of the example specs shipped with benchlog (the demo scenario's parts)."""
    from importlib import resources

    root = resources.files("benchlog.presets").joinpath("specs")
    return sorted(p.name[:-5] for p in root.iterdir() if p.name.endswith(".toml"))


def load_spec(path: str | Path) -> PartSpec:
    """Read a part spec TOML file (or a shipped example by part number, e.g. "AG-MS5").

    Any problem is a SpecError naming the file, the key and the expectation.
    """
    name = str(path)
    if not Path(name).exists() and name in shipped_specs():
        from importlib import resources

        ref = resources.files("benchlog.presets").joinpath("specs", f"{name}.toml")
        return parse_spec(_parse_toml(ref.read_bytes(), f"shipped spec {name}"), f"shipped spec {name}")
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise SpecError(f"{name}: cannot read the spec file ({exc.strerror or exc})") from exc
    return parse_spec(_parse_toml(raw, name), name)


def _parse_toml(raw: bytes, name: str) -> dict:
    try:
        return tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError as exc:
        raise SpecError(f"{name}: expected UTF-8 TOML text ({exc.reason} at byte {exc.start})") from exc
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{name}: not valid TOML: {exc}") from exc


def parse_spec(doc: dict, name: str = "<spec>") -> PartSpec:
    r = _Reader(name)
    top = {"part", "measure", "verdict", "limits", "life", "conditions"}
    unknown = sorted(set(doc) - top)
    if unknown:
        raise SpecError(f"{name}: [{unknown[0]}]: unknown table (expected one of {', '.join(sorted(top))})")
    part = r.table(doc, "part", {"number", "supplier", "description"}, required=True)
    assert part is not None
    if "number" not in part:
        raise SpecError(f"{name}: part.number: expected the part number (a string), but it is missing")
    number = r.text(part, "part", "number")
    if not number.strip():
        raise r.fail("part.number", "a non-empty string", number)

    defaults = AnalysisSettings()
    settle_ns = defaults.settle_ns
    chatter_ns = defaults.chatter_threshold_ns
    floor_ns = 0
    measure = r.table(
        doc,
        "measure",
        {
            "settle_ms",
            "settle_us",
            "chatter_threshold_us",
            "chatter_threshold_ms",
            "glitch_floor_us",
            "glitch_floor_ms",
        },
    )
    if measure:
        v = r.duration_us(measure, "measure", "settle", False, SETTLE_MAX_US)
        settle_ns = settle_ns if v is None else round(v * 1000)
        v = r.duration_us(measure, "measure", "chatter_threshold", False, CHATTER_THRESHOLD_MAX_US)
        chatter_ns = chatter_ns if v is None else round(v * 1000)
        v = r.duration_us(measure, "measure", "glitch_floor", False, GLITCH_FLOOR_MAX_US, lo_open=False)
        floor_ns = 0 if v is None else round(v * 1000)

    band = 0.1
    verdict = r.table(doc, "verdict", {"marginal_band", "max_missed"})
    max_missed = 0
    if verdict:
        if "marginal_band" in verdict:
            band = r.number(verdict, "verdict", "marginal_band", 0.0, 0.9, lo_open=False)
        if "max_missed" in verdict:
            max_missed = r.integer(verdict, "verdict", "max_missed", 0, COUNT_MAX)

    limits: list[Limit] = []
    chatter = None
    lim_tbl = r.table(doc, "limits", set(METRICS) | {"chatter"})
    for metric, tbl in (lim_tbl or {}).items():
        prefix = f"limits.{metric}"
        if not isinstance(tbl, dict):
            raise r.fail(prefix, "a table", tbl)
        if metric == "chatter":
            bad = sorted(set(tbl) - {"max_events", "per_cycles"})
            if bad:
                raise SpecError(f"{name}: {prefix}.{bad[0]}: unknown key (expected max_events, per_cycles)")
            for k in ("max_events", "per_cycles"):
                if k not in tbl:
                    raise SpecError(f"{name}: {prefix}.{k}: expected a whole number, but it is missing")
            chatter = ChatterLimit(
                r.integer(tbl, prefix, "max_events", 0, COUNT_MAX),
                r.integer(tbl, prefix, "per_cycles", 1, LIFE_MAX_CYCLES),
            )
            continue
        allowed = {"percentile", "marginal_band"} | (
            {"max"} if metric in _COUNT_METRICS else {"max_ms", "max_us"}
        )
        bad = sorted(set(tbl) - allowed)
        if bad:
            raise SpecError(
                f"{name}: {prefix}.{bad[0]}: unknown key (expected one of {', '.join(sorted(allowed))})"
            )
        if metric in _COUNT_METRICS:
            if "max" not in tbl:
                raise SpecError(f"{name}: {prefix}.max: expected a whole number, but it is missing")
            max_value = float(r.integer(tbl, prefix, "max", 0, BOUNCE_COUNT_MAX))
        else:
            max_value = r.duration_us(tbl, prefix, "max", True, LIMIT_MAX_US)
        pct = r.number(tbl, prefix, "percentile", 0.0, 100.0) if "percentile" in tbl else 100.0
        own_band = (
            r.number(tbl, prefix, "marginal_band", 0.0, 0.9, lo_open=False)
            if "marginal_band" in tbl
            else None
        )
        limits.append(Limit(metric, float(max_value), pct, own_band))

    life = None
    life_tbl = r.table(doc, "life", {"min_cycles", "confidence"})
    if life_tbl:
        for k in ("min_cycles", "confidence"):
            if k not in life_tbl:
                raise SpecError(f"{name}: life.{k}: expected a value, but it is missing")
        conf = life_tbl["confidence"]
        if isinstance(conf, bool) or not isinstance(conf, int | float) or not 0.5 < conf < 1:
            # every bound qualify states is one-sided at this confidence: below 0.5 it would lie on
            # the wrong side of the estimate
            raise r.fail("life.confidence", "a fraction > 0.5 and < 1 (0.90 for 90 %)", conf)
        life = LifeRequirement(r.integer(life_tbl, "life", "min_cycles", 1, LIFE_MAX_CYCLES), float(conf))

    conditions = r.table(doc, "conditions", set(CONDITION_KEYS)) or {}
    stated = {k: r.text(conditions, "conditions", k) for k in CONDITION_KEYS if k in conditions}
    extra = {"conditions": stated}
    return PartSpec(
        number=number,
        supplier=r.text(part, "part", "supplier"),
        description=r.text(part, "part", "description"),
        settle_ns=settle_ns,
        chatter_threshold_ns=chatter_ns,
        glitch_floor_ns=floor_ns,
        marginal_band=band,
        limits=tuple(limits),
        chatter=chatter,
        max_missed=max_missed,
        life=life,
        source=name,
        extra=extra,
    )


# -- verdicts ---------------------------------------------------------------------------------------


def _selector(rows: np.ndarray, which: str) -> np.ndarray:
    if which == "make":
        return rows["kind"] == MAKE
    if which == "break":
        return rows["kind"] == BREAK
    if which == "operate":
        return rows["drive_level"] == 1
    return rows["drive_level"] == 0


def _grade(values: np.ndarray, limit: float, band: float) -> np.ndarray:
    """PASS / MARGINAL / FAIL per value (NaN values pass: the metric does not apply)."""
    g = np.full(values.shape, PASS, np.uint8)
    g[values > limit * (1.0 - band)] = MARGINAL
    g[values > limit] = FAIL
    return g


def judge(actuations: np.ndarray, spec: PartSpec) -> np.ndarray:
    """Set `verdict` of every actuation in place (and return the array).

    A missed make or stuck contact fails; an incomplete actuation, or one driven while the contact
    already sat in the expected state, gets no verdict; otherwise the worst of its limited metrics.
    """
    rows = actuations
    verdict = np.full(len(rows), PASS, np.uint8)
    for lim in spec.limits:
        column, which, _ = METRICS[lim.metric]
        sel = _selector(rows, which)
        band = spec.marginal_band if lim.marginal_band is None else lim.marginal_band
        values = rows[column].astype(np.float64)
        g = np.where(sel, _grade(values, lim.max_value, band), PASS)
        verdict = np.maximum(verdict, g)
    flags = rows["flags"]
    verdict[(flags & (MISSED | STUCK)) != 0] = FAIL
    verdict[(flags & (INCOMPLETE | NO_CHANGE)) != 0] = NO_VERDICT
    rows["verdict"] = verdict
    return rows


def _fmt(value_us: float, metric: str) -> str:
    if metric in _COUNT_METRICS:
        return f"{value_us:g}"
    return f"{value_us / 1000:.3g} ms" if value_us >= 1000 else f"{value_us:.3g} us"


@dataclass(frozen=True, slots=True)
class UnitFigures:
    """What a unit's verdict is judged on, from its complete actuations (see `unit_verdict`).

    `stat(column, which, percentile)`: that percentile of the column over the rows `which` selects
    (METRICS), NaN left out; None when there is no value. `first_missed`: (stuck, cycle) of the first
    missed or stuck actuation."""

    complete: int
    missed: int
    first_missed: tuple[bool, int] | None
    cycles: int
    chatter_events: int
    stat: Callable[[str, str, float], float | None]


def unit_verdict(actuations: np.ndarray, spec: PartSpec) -> tuple[int, str]:
    """One unit's verdict (PASS / MARGINAL / FAIL, or NO_VERDICT without data) and the reason, in words.

    Each limit is applied to its percentile of the unit's complete actuations; chatter to the events per
    `per_cycles` cycles; missed makes and stuck contacts to `max_missed`; a unit that stopped working
    before `life.min_cycles` fails. The population's life at its confidence is a matter for the
    qualification statistics, not for one unit.
    """
    rows = actuations
    ok = (rows["flags"] & (INCOMPLETE | NO_CHANGE)) == 0
    good = rows[ok]
    if not len(good):
        return NO_VERDICT, "no complete actuations"

    def stat(column: str, which: str, percentile: float) -> float | None:
        values = good[column][_selector(good, which)].astype(np.float64)
        values = values[~np.isnan(values)]
        return float(np.percentile(values, percentile)) if len(values) else None

    missed = good[(good["flags"] & (MISSED | STUCK)) != 0]
    first = (bool(missed["flags"][0] & STUCK), int(missed["cycle"][0])) if len(missed) else None
    figures = UnitFigures(
        complete=len(good),
        missed=len(missed),
        first_missed=first,
        cycles=int(good["cycle"].max() - good["cycle"].min() + 1),
        chatter_events=int(good["chatter"].clip(min=0).sum()),
        stat=stat,
    )
    return verdict_of(figures, spec)


def verdict_of(f: UnitFigures, spec: PartSpec) -> tuple[int, str]:
    """`unit_verdict` from a unit's figures (which a reader streaming actuations can keep up)."""
    if not f.complete:
        return NO_VERDICT, "no complete actuations"
    fails: list[str] = []
    marginals: list[str] = []
    for lim in spec.limits:
        column, which, _ = METRICS[lim.metric]
        stat = f.stat(column, which, lim.percentile)
        if stat is None:
            continue
        band = spec.marginal_band if lim.marginal_band is None else lim.marginal_band
        label = "max" if lim.percentile >= 100 else f"p{lim.percentile:g}"
        text = f"{lim.words} {label} {_fmt(stat, lim.metric)}"
        if stat > lim.max_value:
            fails.append(f"{text} > {_fmt(lim.max_value, lim.metric)} limit")
        elif stat > lim.max_value * (1.0 - band):
            marginals.append(f"{text} within {band:.0%} of the {_fmt(lim.max_value, lim.metric)} limit")
    if f.missed > spec.max_missed and f.first_missed is not None:
        stuck, cycle = f.first_missed
        what = "stuck contact" if stuck else "missed transition"
        fails.append(f"{f.missed} missed/stuck (first: {what} at cycle {cycle})")
    if spec.chatter is not None:
        allowed = spec.chatter.max_events * max(f.cycles, 1) / spec.chatter.per_cycles
        if f.chatter_events > allowed:
            fails.append(
                f"{f.chatter_events} chatter events in {f.cycles} cycles > {spec.chatter.max_events} per "
                f"{spec.chatter.per_cycles}"
            )
    if spec.life is not None and f.first_missed is not None:
        first = f.first_missed[1]
        if first < spec.life.min_cycles:
            fails.append(f"stopped working at cycle {first} < {spec.life.min_cycles} required life")
    if fails:
        return FAIL, "; ".join(fails)
    if marginals:
        return MARGINAL, "; ".join(marginals)
    return PASS, f"within all limits of {spec.number} ({f.complete} actuations)"


def unit_verdicts(actuations: np.ndarray, spec: PartSpec) -> dict[int, tuple[int, str]]:
    """`unit_verdict` for each channel of a bench."""
    return {
        int(c): unit_verdict(actuations[actuations["channel"] == c], spec)
        for c in np.unique(actuations["channel"])
    }
