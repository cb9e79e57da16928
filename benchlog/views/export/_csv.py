"""Actuations as CSV (RFC 4180): one row per make or break, every column the store keeps."""

from __future__ import annotations

import csv
import math
from typing import TextIO

import numpy as np

from benchlog.store import KIND_NAMES, STORED_ACTUATION_DTYPE

UNIT_COLUMNS = ("unit_id", "serial", "lot", "part_number")


def write_actuations_csv(store, out: TextIO, **filters) -> int:
    """Write the actuations `Store.actuations(**filters)` selects; returns how many rows."""
    acts = store.actuations(**filters)
    units = {u.id: u for u in store.units(ids=sorted(set(acts["unit_id"].tolist())))} if len(acts) else {}
    fields = [n for n in STORED_ACTUATION_DTYPE.names if n != "unit_id"]
    w = csv.writer(out, lineterminator="\n")
    w.writerow([*UNIT_COLUMNS, *fields])
    if not len(acts):
        return 0
    uid = acts["unit_id"].tolist()
    cols = []
    for name in fields:
        col = acts[name]
        if name == "kind":
            cols.append([KIND_NAMES.get(k, str(k)) for k in col.tolist()])
        elif col.dtype.kind == "f":
            cols.append(["" if math.isnan(v) else repr(v) for v in col.tolist()])
        else:
            cols.append(col.tolist())
    info = {k: (u.serial, u.lot, u.part_number) for k, u in units.items()}
    w.writerows((u, *info[u], *rest) for u, *rest in zip(uid, *cols, strict=True))
    return int(np.size(uid))
