"""Reading a lot (or a whole part) from the store into the plain arrays benchlog.stats works on.

A LOT argument names, in this order of preference:

1. `PART:LOT`, a lot code of one part number (e.g. `VS-505:L1`);
2. a lot code, when exactly one part has a lot of that code;
3. a part number: every lot of that part, pooled.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field

import numpy as np

from benchlog.errors import DataError, SpecError
from benchlog.stats import METRICS, LifeTable, Population
from benchlog.views.report._samples import SERIES_OF_METRIC, summary_samples

__all__ = ["LotData", "load_lot", "resolve_lot", "spec_for"]


@dataclass
class LotData:
    ident: str  # as the user gave it
    part_number: str
    supplier: str
    lot_codes: list[str]
    population: Population
    serial_of: dict[int, str]  # unit id -> serial
    runs: list = field(default_factory=list)  # RunInfo of every run that held one of its units
    incidents: dict[int, list] = field(default_factory=dict)  # run id -> IncidentInfo list
    spec_toml: str | None = None
    # metric -> [(serial, window mid cycles, {percentile: values per window})], for the report's trends
    trends: dict[str, list] = field(default_factory=dict)

    @property
    def label(self) -> str:
        lots = ", ".join(self.lot_codes)
        return (
            f"{self.part_number} (lot {lots})"
            if len(self.lot_codes) == 1
            else f"{self.part_number} (lots {lots})"
        )


def resolve_lot(store, ident: str) -> tuple[str, list]:
    """(part number, [LotInfo]) for a LOT argument; DataError naming what exists when nothing fits."""
    lots = store.lots()
    if ":" in ident:
        part, code = ident.split(":", 1)
        hit = [lo for lo in lots if lo.part_number == part and lo.code == code]
        if hit:
            return part, hit
    by_code = [lo for lo in lots if lo.code == ident]
    if len({lo.part_number for lo in by_code}) == 1:
        return by_code[0].part_number, by_code
    if by_code:
        choices = ", ".join(f"{lo.part_number}:{lo.code}" for lo in by_code)
        raise DataError(f"lot code {ident!r} belongs to several parts; name one of {choices}")
    by_part = [lo for lo in lots if lo.part_number == ident]
    if by_part:
        return ident, by_part
    known = ", ".join(sorted({f"{lo.part_number}:{lo.code}" for lo in lots})) or "none"
    raise DataError(f"no lot or part {ident!r} in the store (lots: {known})")


def load_lot(store, ident: str, *, operation: str = "coil cycle", with_runs: bool = True) -> LotData:
    part, lots = resolve_lot(store, ident)
    lot_ids = [lo.id for lo in lots]
    units = [u for lo in lots for u in store.units(lot=lo.id)]
    serial_of = {u.id: u.serial for u in units}
    samples = summary_samples(store.summaries(lots=lot_ids), serial_of)
    rows: list[tuple[object, float, bool, str]] = []
    for lo in lots:
        lt = store.life_table(lot=lo.id)
        for serial, cycles, failed, mode in zip(lt.serial, lt.cycles, lt.failed, lt.mode, strict=True):
            if cycles > 0:  # a unit that never cycled tells nothing about life
                rows.append((serial, float(cycles), bool(failed), mode or "unknown"))
    life = LifeTable.of(rows) if rows else None
    pop = Population(part if len(lots) > 1 else f"{part}:{lots[0].code}", samples, life, operation)
    supplier = units[0].supplier if units else ""
    spec_toml = next((p.spec_toml for p in store.parts() if p.part_number == part), None)
    data = LotData(ident, part, supplier, [lo.code for lo in lots], pop, serial_of, spec_toml=spec_toml)
    if with_runs:
        data.trends = _trends(store, serial_of)
        ids = set(serial_of)
        for run in store.runs():
            if any(ru.unit.id in ids for ru in store.run_units(run.id)):
                data.runs.append(run)
                data.incidents[run.id] = store.incidents(run.id)
    return data


TREND_PERCENTILES = (50.0, 90.0, 95.0, 99.0)


def _trends(store, serial_of: dict[int, str]) -> dict[str, list]:
    """Per metric and unit, the percentiles of each summary window (window by window over life)."""
    from benchlog.store import SUMMARY_WINDOW

    out: dict[str, list] = {}
    for key, m in METRICS.items():
        if m.kind == "rate" or not serial_of:
            continue
        unit, window, _, pct = store.summary_windows(
            SERIES_OF_METRIC[key], units=list(serial_of), percentiles=TREND_PERCENTILES
        )
        rows = []
        for u in np.unique(unit).tolist():
            sel = unit == u
            mid = (window[sel] + 0.5) * SUMMARY_WINDOW
            rows.append((serial_of[u], mid, {p: pct[sel, j] for j, p in enumerate(TREND_PERCENTILES)}))
        out[key] = rows
    return out


def spec_for(spec_arg: str | None, candidate: LotData):
    """The part spec: `--spec` (a file or a shipped part number), else the one stored with the
    candidate's part."""
    from benchlog.analysis import load_spec, parse_spec

    if spec_arg:
        return load_spec(spec_arg), spec_arg
    if candidate.spec_toml:
        name = f"spec stored with {candidate.part_number}"
        try:
            return parse_spec(tomllib.loads(candidate.spec_toml), name), name
        except tomllib.TOMLDecodeError as exc:
            raise SpecError(f"{name}: not valid TOML: {exc}") from exc
    raise SpecError(f"no --spec given and the store holds no spec for {candidate.part_number}")
