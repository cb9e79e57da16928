"""Simulator parameters: dataclasses, TOML loading and validation.

Every value here is invented for the simulator (docs/simulator.md); none is a measured property of a real
part. A malformed file becomes one `ConfigError` naming the file and the key.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field, fields, replace
from importlib import resources
from pathlib import Path
from typing import Any

from benchlog.errors import ConfigError

FORMS = ("line", "packed")
FAILURE_MODES = ("welded", "missed_make", "chatter")


@dataclass(frozen=True, slots=True)
class Spread:
    """A positive quantity drawn log-normally: `median_us` and the log-space `sigma`."""

    median_us: float
    sigma: float = 0.1


@dataclass(frozen=True, slots=True)
class Bounce:
    """One side's bounce (make or break) on a new unit.

    After the first transition the contact returns to its old state `count_mean` times on average
    (Poisson). The i-th return lasts `first_gap_us * decay**i`, the stretch in the new state before it
    `dwell_us * decay**i`, each times a log-normal jitter of log-space sigma `jitter`.
    """

    count_mean: float
    first_gap_us: float
    dwell_us: float
    decay: float = 0.6
    jitter: float = 0.3


@dataclass(frozen=True, slots=True)
class Population:
    """Units of one part from one supplier."""

    name: str
    supplier: str
    operate: Spread
    release: Spread
    make: Bounce
    break_: Bounce
    life_shape: float
    life_scale: float
    failure: dict[str, float]  # mode -> probability, sums to 1
    wear_per_100k: float = 0.5  # bounce count and lengths grow by this fraction per 100,000 cycles
    chatter_rate_hz: float = 30.0  # openings per second of closed time once chatter has set in
    chatter_open: Spread = field(default_factory=lambda: Spread(80.0, 0.5))


@dataclass(frozen=True, slots=True)
class Unit:
    channel: int
    population: str
    serial: str


@dataclass(frozen=True, slots=True)
class SamplerSpec:
    board_id: str = "SIM-BENCH-01"
    clock_hz: int = 1_000_000
    counter_bits: int = 32
    ppm: float = 0.0  # the sampler's clock runs fast by this many parts per million
    channels: int = 8
    form: str = "line"
    beat_s: float = 0.5  # beat period in sampler seconds (shortened to a quarter wrap when needed)
    min_pulse_us: float = 2.0  # the input stage misses nothing longer than this; shorter is widened
    max_bounces: int = 24
    boot_ms: float = 3.0  # a reset blinds the sampler this long before it announces again


@dataclass(frozen=True, slots=True)
class Faults:
    drop_rate: float = 0.0  # probability per byte sent that it never arrives
    flip_rate: float = 0.0  # probability per byte sent that one of its bits flips
    damage_from_s: float = 0.0  # byte damage applies only to bytes generated in this sampler-time window
    damage_until_s: float = math.inf
    reset_at_cycle: int = -1  # the sampler restarts just before this cycle of its first planned channel
    pull_at_s: float = -1.0  # sampler time at which the cable is pulled (-1: never)
    pull_for_s: float = 2.0  # wall-clock seconds the cable stays out
    pull_powers_off: bool = False  # a bus-powered board: it comes back reset
    buffer_edges: int = 0  # sampler edge buffer; 0 = unlimited (no overflow model)
    drain_edges_per_s: float = 0.0  # how fast the sampler's transmitter empties that buffer


@dataclass(frozen=True, slots=True)
class Autostart:
    on_ms: float
    off_ms: float
    cycles: int = 0


@dataclass(frozen=True, slots=True)
class SimConfig:
    sampler: SamplerSpec
    populations: dict[str, Population]
    units: tuple[Unit, ...]
    faults: Faults = Faults()
    autostart: Autostart | None = None
    source: str = "<options>"

    def with_faults(self, **changes: Any) -> SimConfig:
        cfg = replace(self, faults=replace(self.faults, **changes))
        _validate(cfg)
        return cfg

    def with_sampler(self, **changes: Any) -> SimConfig:
        cfg = replace(self, sampler=replace(self.sampler, **changes))
        _validate(cfg)
        return cfg


def preset_names() -> list[str]:
    """The shipped simulator presets (the folder also holds tables that are not presets)."""
    root = resources.files("benchlog.presets")
    return sorted(
        p.name[:-5]
        for p in root.iterdir()
        if p.name.endswith(".toml") and "\n[sampler]" in "\n" + p.read_text("utf-8")
    )


def load_preset(name: str) -> SimConfig:
    """A preset shipped in `benchlog/presets/NAME.toml`, or a path to a TOML file."""
    if name.endswith(".toml") or "/" in name:
        return load_config(Path(name))
    if name not in preset_names():
        raise ConfigError(f"no simulator preset {name!r} (presets: {', '.join(preset_names())})")
    text = resources.files("benchlog.presets").joinpath(f"{name}.toml").read_text("utf-8")
    return parse_config(text, source=f"preset {name}")


def load_config(path: Path) -> SimConfig:
    try:
        text = Path(path).read_text("utf-8")
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read simulator file ({exc.strerror})") from exc
    return parse_config(text, source=str(path))


class _Reader:
    def __init__(self, source: str) -> None:
        self.source = source

    def fail(self, key: str, msg: str) -> ConfigError:
        return ConfigError(f"{self.source}: {key}: {msg}")

    def table(self, data: Any, key: str) -> dict[str, Any]:
        if not isinstance(data, dict):
            raise self.fail(key, "expected a table")
        return data

    def build(self, cls: type, data: Any, key: str, extra: dict[str, Any] | None = None) -> Any:
        data = dict(self.table(data, key))
        known = {f.name: f for f in fields(cls)}
        kwargs: dict[str, Any] = dict(extra or {})
        for k, v in data.items():
            name = "break_" if k == "break" else k
            if name not in known or name in kwargs:
                raise self.fail(f"{key}.{k}", "unknown key")
            kwargs[name] = self.value(known[name], v, f"{key}.{k}")
        try:
            return cls(**kwargs)
        except TypeError as exc:
            missing = [f.name for f in fields(cls) if f.name not in kwargs]
            raise self.fail(key, f"missing key {missing[0] if missing else '?'}") from exc

    def value(self, f: Any, v: Any, key: str) -> Any:
        t = f.type if isinstance(f.type, str) else getattr(f.type, "__name__", "")
        if t in ("Spread", "Bounce"):
            return self.build(Spread if t == "Spread" else Bounce, v, key)
        if t == "float":
            if isinstance(v, bool) or not isinstance(v, int | float):
                raise self.fail(key, f"expected a number, got {v!r}")
            return float(v)
        if t == "int":
            if isinstance(v, bool) or not isinstance(v, int):
                raise self.fail(key, f"expected an integer, got {v!r}")
            return v
        if t == "bool":
            if not isinstance(v, bool):
                raise self.fail(key, f"expected true or false, got {v!r}")
            return v
        if t == "str":
            if not isinstance(v, str):
                raise self.fail(key, f"expected a string, got {v!r}")
            return v
        if t.startswith("dict"):
            table = self.table(v, key)
            for k2, v2 in table.items():
                if isinstance(v2, bool) or not isinstance(v2, int | float):
                    raise self.fail(f"{key}.{k2}", f"expected a number, got {v2!r}")
            return {k2: float(v2) for k2, v2 in table.items()}
        return v


def parse_config(text: str, source: str = "<text>") -> SimConfig:
    r = _Reader(source)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{source}: not valid TOML ({exc})") from exc
    for k in data:
        if k not in ("sampler", "populations", "units", "faults", "autostart"):
            raise r.fail(k, "unknown table")
    sampler = r.build(SamplerSpec, data.get("sampler", {}), "sampler")
    pops: dict[str, Population] = {}
    for name, body in r.table(data.get("populations", {}), "populations").items():
        pops[name] = r.build(Population, body, f"populations.{name}", extra={"name": name})
    units_raw = data.get("units", [])
    if not isinstance(units_raw, list):
        raise r.fail("units", "expected an array of tables ([[units]])")
    units = tuple(r.build(Unit, u, f"units[{i}]") for i, u in enumerate(units_raw))
    faults = r.build(Faults, data.get("faults", {}), "faults")
    auto = r.build(Autostart, data["autostart"], "autostart") if "autostart" in data else None
    cfg = SimConfig(sampler, pops, units, faults, auto, source)
    _validate(cfg)
    return cfg


def _validate(cfg: SimConfig) -> None:
    r = _Reader(cfg.source)
    s = cfg.sampler
    if not 16 <= s.counter_bits <= 64:
        raise r.fail("sampler.counter_bits", f"must be 16 to 64, got {s.counter_bits}")
    if not 1_000 <= s.clock_hz <= 1_000_000_000:
        raise r.fail("sampler.clock_hz", f"must be 1 kHz to 1 GHz, got {s.clock_hz}")
    if not 1 <= s.channels <= 16:
        raise r.fail("sampler.channels", f"must be 1 to 16, got {s.channels}")
    if s.form not in FORMS:
        raise r.fail("sampler.form", f"must be one of {', '.join(FORMS)}, got {s.form!r}")
    if abs(s.ppm) > 10_000:
        raise r.fail("sampler.ppm", f"must be within +-10000, got {s.ppm}")
    bid = s.board_id
    if not (1 <= len(bid) <= 32 and bid.isascii() and bid.isprintable() and " " not in bid):
        raise r.fail("sampler.board_id", "must be 1-32 printable ASCII characters without spaces")
    if not s.beat_s > 0:
        raise r.fail("sampler.beat_s", "must be > 0")
    if not 1 <= s.max_bounces <= 200:
        raise r.fail("sampler.max_bounces", "must be 1 to 200")
    for name, p in cfg.populations.items():
        key = f"populations.{name}"
        for part, sp in (("operate", p.operate), ("release", p.release), ("chatter_open", p.chatter_open)):
            if not (sp.median_us > 0 and sp.sigma >= 0):
                raise r.fail(f"{key}.{part}", "median_us must be > 0 and sigma >= 0")
        for part, b in (("make", p.make), ("break", p.break_)):
            if not (b.count_mean >= 0 and b.first_gap_us > 0 and b.dwell_us > 0 and 0 < b.decay <= 1):
                raise r.fail(
                    f"{key}.{part}", "needs count_mean >= 0, first_gap_us > 0, dwell_us > 0, 0 < decay <= 1"
                )
            if b.jitter < 0:
                raise r.fail(f"{key}.{part}.jitter", "must be >= 0")
        if not (p.life_shape > 0 and p.life_scale > 0):
            raise r.fail(f"{key}.life_shape", "life_shape and life_scale must be > 0")
        bad = [m for m in p.failure if m not in FAILURE_MODES]
        if bad:
            raise r.fail(
                f"{key}.failure.{bad[0]}", f"unknown failure mode (known: {', '.join(FAILURE_MODES)})"
            )
        total = sum(p.failure.values())
        if any(v < 0 for v in p.failure.values()) or abs(total - 1.0) > 1e-6:
            raise r.fail(f"{key}.failure", f"probabilities must be >= 0 and sum to 1, sum is {total:g}")
    seen: set[int] = set()
    for i, u in enumerate(cfg.units):
        if not 0 <= u.channel < s.channels:
            raise r.fail(f"units[{i}].channel", f"must be 0 to {s.channels - 1}, got {u.channel}")
        if u.channel in seen:
            raise r.fail(f"units[{i}].channel", f"channel {u.channel} already has a unit")
        seen.add(u.channel)
        if u.population not in cfg.populations:
            raise r.fail(f"units[{i}].population", f"no population {u.population!r}")
    f = cfg.faults
    for k in ("drop_rate", "flip_rate"):
        if not 0 <= getattr(f, k) < 1:
            raise r.fail(f"faults.{k}", "must be in [0, 1)")
    if f.buffer_edges < 0 or f.drain_edges_per_s < 0 or (f.buffer_edges > 0) != (f.drain_edges_per_s > 0):
        raise r.fail("faults.buffer_edges", "buffer_edges and drain_edges_per_s are set together, both > 0")
    if f.pull_for_s < 0:
        raise r.fail("faults.pull_for_s", "must be >= 0")
