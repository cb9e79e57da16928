"""The command line's forms for units and cycle profiles, and registering units in the store.

Units: `CH=SERIAL` or `CH=PART/LOT/SERIAL` (the part number and lot code may hold any character but
`/`, the serial any character at all). Channels are 0-15. The part and lot default to
`--part` / `--lot`. Profile: `ON_MS:OFF_MS:CYCLES` (CYCLES 0 = until stopped), e.g. `50:50:200000`.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

from benchlog.errors import ConfigError

DEFAULT_LOT = "unnamed"


@dataclass(frozen=True, slots=True)
class UnitAssignment:
    channel: int
    serial: str
    part: str
    lot: str = DEFAULT_LOT
    supplier: str = ""
    notes: str | None = None


@dataclass(frozen=True, slots=True)
class Profile:
    on_ms: float
    off_ms: float
    cycles: int

    @property
    def as_dict(self) -> dict:
        return {"on_ms": self.on_ms, "off_ms": self.off_ms, "cycles": self.cycles}


def parse_profile(text: str) -> Profile:
    parts = text.split(":")
    if len(parts) != 3:
        raise ConfigError(f"profile {text!r}: expected ON_MS:OFF_MS:CYCLES, e.g. 50:50:200000")
    try:
        on, off, cycles = float(parts[0]), float(parts[1]), int(parts[2])
    except ValueError as exc:
        raise ConfigError(f"profile {text!r}: expected numbers in ON_MS:OFF_MS:CYCLES") from exc
    if not (0 < on <= 3_600_000 and 0 < off <= 3_600_000):
        raise ConfigError(f"profile {text!r}: on and off times must be > 0 ms and at most an hour")
    if cycles < 0 or cycles > 2**31 - 1:
        raise ConfigError(f"profile {text!r}: cycles must be 0 (until stopped) or a positive count")
    return Profile(on, off, cycles)


def parse_units(
    items: list[str], *, part: str | None, lot: str | None, supplier: str = ""
) -> list[UnitAssignment]:
    out: list[UnitAssignment] = []
    for item in items:
        out.append(_parse_one(item, part, lot, supplier))
    _check(out)
    return out


def _parse_one(text: str, part: str | None, lot: str | None, supplier: str) -> UnitAssignment:
    ch_text, sep, rest = text.partition("=")
    if not sep or not rest:
        raise ConfigError(f"unit {text!r}: expected CH=SERIAL or CH=PART/LOT/SERIAL")
    try:
        channel = int(ch_text)
    except ValueError as exc:
        raise ConfigError(f"unit {text!r}: the channel must be a number 0-15") from exc
    if not 0 <= channel <= 15:
        raise ConfigError(f"unit {text!r}: the channel must be 0-15")
    fields = rest.split("/", 2)
    if len(fields) == 3:
        p, lt, serial = fields
    elif len(fields) == 1:
        p, lt, serial = part, lot or DEFAULT_LOT, fields[0]
    else:
        raise ConfigError(f"unit {text!r}: expected CH=SERIAL or CH=PART/LOT/SERIAL")
    if not p:
        raise ConfigError(f"unit {text!r}: no part number (give --part or CH=PART/LOT/SERIAL)")
    if not serial:
        raise ConfigError(f"unit {text!r}: empty serial")
    return UnitAssignment(channel, serial, p, lt or DEFAULT_LOT, supplier)


def _check(units: list[UnitAssignment]) -> None:
    seen: dict[int, str] = {}
    for u in units:
        if u.channel in seen:
            raise ConfigError(f"channel {u.channel} is given twice ({seen[u.channel]!r} and {u.serial!r})")
        seen[u.channel] = u.serial
    keys = [(u.part, u.lot, u.serial) for u in units]
    if len(set(keys)) != len(keys):
        raise ConfigError("the same unit is given on two channels")


def spec_text(source: str) -> str | None:
    """The TOML text of a spec given as a path or a shipped part number (None if neither)."""
    path = Path(source)
    if path.is_file():
        return path.read_text("utf-8", errors="replace")
    ref = resources.files("benchlog.presets").joinpath("specs", f"{source}.toml")
    return ref.read_text("utf-8") if ref.is_file() else None


def spec_for(part: str, explicit: str | None):
    """(PartSpec or None, TOML text or None) for a part: the explicit spec, else a shipped one."""
    from benchlog.analysis import load_spec, shipped_specs

    source = explicit or (part if part in shipped_specs() else None)
    if source is None:
        return None, None
    spec = load_spec(source)
    return spec, spec_text(source)


def aged_spec(sp, text: str | None, factor: float):
    """(spec, TOML text) with the life requirement stated in the cycles of parts that age `factor`
    times faster than real ones (the demo's simulated benches): `min_cycles / factor`. The limits on
    each actuation stay as they are."""
    import re
    from dataclasses import replace

    if sp is None or sp.life is None or factor == 1.0:
        return sp, text
    real = sp.life.min_cycles
    cycles = max(1, round(real / factor))
    sp = replace(sp, life=replace(sp.life, min_cycles=cycles))
    if text is not None:
        note = f"min_cycles = {cycles}  # simulated parts aged x{factor:.3g}: {real} cycles of a real part"
        text = re.sub(r"(?m)^min_cycles\s*=\s*[0-9_]+", lambda m: note, text, count=1)
    return sp, text


def register_units(
    store, units: list[UnitAssignment], spec: str | None = None, *, ageing: float = 1.0
) -> tuple[dict[int, int], dict]:
    """Register (or reuse) parts, lots and units; returns ({channel: unit_id}, {channel: PartSpec}).
    `ageing`: the parts age this many times faster than real ones (simulated), so the life
    requirement is stored in their cycles (`aged_spec`)."""
    ids: dict[int, int] = {}
    specs: dict[int, object] = {}
    by_part: dict[str, tuple[int, object]] = {}
    for u in units:
        if u.part not in by_part:
            sp, text = aged_spec(*spec_for(u.part, spec), ageing)
            doc = _spec_doc(sp)
            supplier = u.supplier or (getattr(sp, "supplier", "") if sp is not None else "")
            by_part[u.part] = (store.register_part(u.part, supplier, spec_toml=text, spec=doc), sp)
        part_id, sp = by_part[u.part]
        lot_id = store.register_lot(part_id, u.lot)
        ids[u.channel] = store.register_unit(lot_id, u.serial, u.notes)
        specs[u.channel] = sp
    return ids, specs


def _spec_doc(sp) -> dict | None:
    if sp is None:
        return None
    from dataclasses import asdict

    try:
        return json.loads(json.dumps(asdict(sp), default=str))
    except TypeError:
        return {"number": getattr(sp, "number", "")}
