"""Actuations as CSV (RFC 4180): one row per make or break, every column the store keeps."""

from __future__ import annotations

import csv
import math
from typing import TextIO

import numpy as np

from benchlog.store import KIND_NAMES, STORED_ACTUATION_DTYPE

UNIT_COLUMNS = ("unit_id", "serial", "lot", "part_number")


def write_actuations_csv(store, out: TextIO, **filters) -> int:
    """Write the actuations `Store.actuations(**filters)` selects, streamed batch by batch
    (`Store.iter_actuations`, so memory stays flat); returns how many rows."""
    fields = [n for n in STORED_ACTUATION_DTYPE.names if n != "unit_id"]
    w = csv.writer(out, lineterminator="\n")
    w.writerow([*UNIT_COLUMNS, *fields])
    info: dict[int, tuple[str, str, str]] = {}
    total = 0
    for acts in store.iter_actuations(**filters):
        uid = acts["unit_id"].tolist()
        missing = sorted(set(uid) - set(info))
        if missing:
            info.update({u.id: (u.serial, u.lot, u.part_number) for u in store.units(ids=missing)})
        cols = []
        for name in fields:
            col = acts[name]
            if name == "kind":
                cols.append([KIND_NAMES.get(k, str(k)) for k in col.tolist()])
            elif col.dtype.kind == "f":
                cols.append(["" if math.isnan(v) else repr(v) for v in col.tolist()])
            else:
                cols.append(col.tolist())
        w.writerows((u, *info[u], *rest) for u, *rest in zip(uid, *cols, strict=True))
        total += int(np.size(uid))
    return total
