"""Reading a lot (or a whole part) from the store into the plain arrays benchlog.stats works on.

A LOT argument names, in this order of preference:

1. `PART:LOT`, a lot code of one part number (e.g. `VS-505:L1`);
2. a lot code, when exactly one part has a lot of that code;
3. a part number: every lot of that part, pooled.
"""

from __future__ import annotations

import hashlib
import tomllib
from dataclasses import dataclass, field

import numpy as np

from benchlog.errors import DataError, SpecError
from benchlog.stats import LifeTable, Population, metric_samples
from benchlog.store import STORED_ACTUATION_DTYPE

STORED_FIELDS = STORED_ACTUATION_DTYPE.names

__all__ = ["LotData", "data_checksum", "load_lot", "resolve_lot", "spec_for"]


@dataclass
class LotData:
    ident: str  # as the user gave it
    part_number: str
    supplier: str
    lot_codes: list[str]
    population: Population
    actuations: np.ndarray  # the store's STORED_ACTUATION_DTYPE rows
    serial_of: dict[int, str]  # unit id -> serial
    runs: list = field(default_factory=list)  # RunInfo of every run that held one of its units
    incidents: dict[int, list] = field(default_factory=dict)  # run id -> IncidentInfo list
    spec_toml: str | None = None
    benches: dict = field(default_factory=dict)  # bench id -> BenchInfo of the runs' benches

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
    acts = store.actuations(lots=lot_ids)
    labels = np.array([serial_of.get(int(i), str(i)) for i in acts["unit_id"]], dtype=object)
    rows: list[tuple[object, float, bool, str]] = []
    for lo in lots:
        lt = store.life_table(lot=lo.id)
        for serial, cycles, failed, mode in zip(lt.serial, lt.cycles, lt.failed, lt.mode, strict=True):
            if cycles > 0:  # a unit that never cycled tells nothing about life
                rows.append((serial, float(cycles), bool(failed), mode or "unknown"))
    life = LifeTable.of(rows) if rows else None
    pop = Population(
        part if len(lots) > 1 else f"{part}:{lots[0].code}", metric_samples(acts, labels), life, operation
    )
    supplier = units[0].supplier if units else ""
    spec_toml = next((p.spec_toml for p in store.parts() if p.part_number == part), None)
    data = LotData(ident, part, supplier, [lo.code for lo in lots], pop, acts, serial_of, spec_toml=spec_toml)
    if with_runs:
        ids = set(serial_of)
        benches = {b.id: b for b in store.benches()}
        for run in store.runs():
            if any(ru.unit.id in ids for ru in store.run_units(run.id)):
                data.runs.append(run)
                data.incidents[run.id] = store.incidents(run.id)
                if run.bench_id in benches:
                    data.benches[run.bench_id] = benches[run.bench_id]
    return data


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


def data_checksum(lots: list[LotData]) -> str:
    """SHA-256 of the data a report is drawn from: per lot, its part and lot codes, then every unit's
    actuations (by serial, in cycle order; the store's row ids left out, so the same data in another
    store gives the same sum) and its life table row. Recomputing it from the store shows whether
    the data changed since the report was written."""
    h = hashlib.sha256()
    cols = [n for n in STORED_FIELDS if n not in ("unit_id", "run_id")]
    for lot in lots:
        h.update(f"lot\0{lot.part_number}\0{','.join(lot.lot_codes)}\0".encode())
        a = lot.actuations
        serials = np.array([lot.serial_of.get(int(u), str(u)) for u in a["unit_id"]], dtype=object)
        for serial in sorted(set(serials.tolist())):
            rows = a[serials == serial]
            rows = rows[np.lexsort((rows["kind"], rows["t_start_ns"], rows["cycle"]))]
            h.update(f"unit\0{serial}\0{len(rows)}\0".encode())
            for c in cols:
                h.update(np.ascontiguousarray(rows[c]).astype(rows.dtype[c].newbyteorder("<")).tobytes())
        life = lot.population.life
        if life is not None:
            for i in np.argsort(np.array([str(u) for u in life.unit]), kind="stable"):
                row = (
                    f"life\0{life.unit[i]}\0{float(life.cycles[i])!r}\0{bool(life.failed[i])}\0{life.mode[i]}"
                )
                h.update(row.encode())
    return h.hexdigest()
