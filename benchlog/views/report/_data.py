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
from benchlog.stats import METRICS, LifeTable, Population
from benchlog.views.report._samples import SERIES_OF_METRIC, summary_samples

__all__ = ["LotData", "data_checksum", "load_lot", "resolve_lot", "spec_for"]


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
    benches: dict = field(default_factory=dict)  # bench id -> BenchInfo of the runs' benches
    # metric -> [(serial, window mid cycles, {percentile: values per window})], for the report's trends
    trends: dict[str, list] = field(default_factory=dict)
    measured: int = 0  # make and break actuations measured (the summaries leave out incomplete ones)

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
    summaries = store.summaries(lots=lot_ids)
    samples = summary_samples(summaries, serial_of)
    measured = sum(
        int(summaries[f"{kind}.bounce_us"].count.sum())
        for kind in ("make", "break")
        if f"{kind}.bounce_us" in summaries
    )
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
    data = LotData(
        ident,
        part,
        supplier,
        [lo.code for lo in lots],
        pop,
        serial_of,
        spec_toml=spec_toml,
        measured=measured,
    )
    if with_runs:
        data.trends = _trends(store, serial_of)
        ids = set(serial_of)
        benches = {b.id: b for b in store.benches()}
        for run in store.runs():
            if any(ru.unit.id in ids for ru in store.run_units(run.id)):
                data.runs.append(run)
                data.incidents[run.id] = store.incidents(run.id)
                if run.bench_id in benches:
                    data.benches[run.bench_id] = benches[run.bench_id]
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


def data_checksum(lots: list[LotData]) -> str:
    """SHA-256 of the data a report is drawn from: per lot, its part and lot codes, then per metric
    every unit's sample as read from the store's distribution summaries (by serial: the values of its
    histogram bins, their exact counts and the unit's exact sum and sum of squares; the store's row ids
    left out, so the same data in another store gives the same sum), and the life table. Recomputing
    it from the store shows whether the data changed since the report was written. It reads no more
    than the report does (the summaries, not every actuation)."""
    h = hashlib.sha256()
    for lot in lots:
        h.update(f"lot\0{lot.part_number}\0{','.join(lot.lot_codes)}\0".encode())
        for metric in sorted(lot.population.samples):
            sample = lot.population.samples[metric]
            weights = np.ones(len(sample.values)) if sample.weights is None else sample.weights
            for code in np.argsort(np.array(sample.unit_names, dtype=str), kind="stable"):
                mine = sample.unit == code
                values, counts = sample.values[mine], weights[mine]
                order = np.lexsort((counts, values))
                h.update(f"{metric}\0{sample.unit_names[code]}\0{int(mine.sum())}\0".encode())
                h.update(np.ascontiguousarray(values[order], dtype="<f8").tobytes())
                h.update(np.ascontiguousarray(counts[order], dtype="<f8").tobytes())
                if sample.moments is not None:
                    h.update(np.ascontiguousarray(sample.moments[:, code], dtype="<f8").tobytes())
        life = lot.population.life
        if life is not None:
            for i in np.argsort(np.array([str(u) for u in life.unit]), kind="stable"):
                row = (
                    f"life\0{life.unit[i]}\0{float(life.cycles[i])!r}\0{bool(life.failed[i])}\0{life.mode[i]}"
                )
                h.update(row.encode())
    return h.hexdigest()
