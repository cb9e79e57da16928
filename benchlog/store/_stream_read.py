"""Raw actuations streamed in columnar batches (`Store.iter_actuations`): memory flat whatever the
store's size, each batch read through the same driver path as `Store.actuations` (a binary COPY
into one numpy array on PostgreSQL)."""

from __future__ import annotations

from collections.abc import Iterator
from numbers import Integral

import numpy as np
from sqlalchemy import func, select

from . import _schema as s

__all__ = ["StreamReadAPI"]

BATCH = 1 << 18


class StreamReadAPI:
    def iter_actuations(
        self,
        *,
        units: list[int] | None = None,
        lots: list[int] | None = None,
        parts: list[int | str] | None = None,
        runs: list[int] | None = None,
        kind: int | str | None = None,
        cycles: tuple[int, int] | None = None,
        batch: int = BATCH,
    ) -> Iterator[np.ndarray]:
        """The rows `actuations(...)` would return, in the same order (unit, cycle, kind), as numpy
        batches of about `batch` rows: one unit's span of cycles at a time, found through the
        (unit, cycle) index. Empty batches are not yielded."""
        a = s.Actuation.__table__.c
        uq = select(s.Unit.id).join(s.Lot)
        if units is not None:
            uq = uq.where(s.Unit.id.in_([int(u) for u in units]))
        if lots is not None:
            uq = uq.where(s.Lot.id.in_([int(x) for x in lots]))
        if parts is not None:
            ids = [int(p) for p in parts if isinstance(p, Integral)]
            names = [p for p in parts if isinstance(p, str)]
            uq = uq.join(s.Part).where(s.Part.id.in_(ids) | s.Part.part_number.in_(names))
        q = select(a.unit_id, func.min(a.cycle), func.max(a.cycle), func.count()).where(
            a.unit_id.in_(uq.scalar_subquery())
        )
        if runs is not None:
            q = q.where(a.run_id.in_([int(r) for r in runs]))
        if cycles is not None:
            q = q.where(a.cycle.between(int(cycles[0]), int(cycles[1])))
        with self._read("actuations") as c:  # type: ignore[attr-defined]
            spans = c.execute(q.group_by(a.unit_id).order_by(a.unit_id)).all()
        for unit, lo, hi, n in spans:
            # rows spread evenly over the unit's cycles: a span of cycles holding about `batch` rows
            step = max(1, int((int(hi) - int(lo) + 1) * batch // max(int(n), 1)))
            for first in range(int(lo), int(hi) + 1, step):
                rows = self.actuations(  # type: ignore[attr-defined]
                    units=[int(unit)], runs=runs, kind=kind, cycles=(first, min(first + step - 1, int(hi)))
                )
                if len(rows):
                    yield rows
