"""Each unit's life as CSV (RFC 4180) or JSON: status, failure, first spec break and first drift flag, with
their times.

Wall-clock times are ISO 8601 in UTC with a Z; run times are integer ns of the run's own clock; an empty
field (CSV) or null (JSON) is a time not recorded (failures stored before revision 0007 have no wall-clock
time; a store before revision 0008 has no first drift flag)."""

from __future__ import annotations

import csv
import json
from typing import TextIO

from benchlog.views._times import utc_text

UNIT_LIFE_COLUMNS = (
    "unit_id",
    "serial",
    "lot",
    "part_number",
    "status",
    "cycles",
    "failed_at_cycle",
    "failure_mode",
    "failed_run_id",
    "failed_at_run_ns",
    "failed_at_utc",
    "first_break_cycle",
    "first_break_run_id",
    "first_break_run_ns",
    "first_break_utc",
    "first_drift_metric",
    "first_drift_cycle",
    "first_drift_run_id",
    "first_drift_run_ns",
    "first_drift_utc",
)


def _units(store, *, units=None, lots=None, parts=None) -> list:
    rows = store.units(ids=units) if units else store.units()
    if lots:
        rows = [u for u in rows if u.lot_id in set(lots)]
    if parts:
        rows = [u for u in rows if u.part_number in set(parts)]
    return rows


def _record(u) -> dict:
    failed = u.status == "failed"
    return {
        "unit_id": u.id,
        "serial": u.serial,
        "lot": u.lot,
        "part_number": u.part_number,
        "status": u.status,
        "cycles": u.cycles,
        "failed_at_cycle": u.failed_at_cycle if failed else None,
        "failure_mode": u.failure_mode if failed else None,
        "failed_run_id": u.run_id if failed else None,
        "failed_at_run_ns": u.failed_at_ns if failed else None,
        "failed_at_utc": (utc_text(u.failed_at) or None) if failed else None,
        "first_break_cycle": u.first_break_cycle,
        "first_break_run_id": u.first_break_run_id,
        "first_break_run_ns": u.first_break_ns,
        "first_break_utc": utc_text(u.first_break_at) or None,
        "first_drift_metric": u.first_drift_metric,
        "first_drift_cycle": u.first_drift_cycle,
        "first_drift_run_id": u.first_drift_run_id,
        "first_drift_run_ns": u.first_drift_ns,
        "first_drift_utc": utc_text(u.first_drift_at) or None,
    }


def write_units(store, out: TextIO, *, as_json: bool = False, **filters) -> int:
    """Write the selected units' lives (`units`, `lots`: ids; `parts`: part numbers); returns how many."""
    records = [_record(u) for u in _units(store, **filters)]
    if as_json:
        json.dump({"units": records}, out, indent=2)
        out.write("\n")
    else:
        w = csv.writer(out, lineterminator="\n")
        w.writerow(UNIT_LIFE_COLUMNS)
        w.writerows(["" if r[c] is None else r[c] for c in UNIT_LIFE_COLUMNS] for r in records)
    return len(records)
