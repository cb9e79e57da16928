"""Raw edges as a value change dump (VCD, IEEE Std 1364-2005 clause 18): one 1-bit wire per unit.

Times are ns from the start of the exported span (`$timescale 1 ns`); the span's start in run time
and each unit's full name (serial, lot, part) are in `$comment`s, because VCD identifiers may not hold
spaces or most punctuation. A contact's level is 1 when closed. The value before a unit's first edge
in the span is the opposite of that edge's level (every edge is a change); a unit with no edge in the
span is dumped as `x` (unknown).
"""

from __future__ import annotations

import re
from datetime import UTC, datetime
from typing import TextIO

import numpy as np

from benchlog import __version__
from benchlog.errors import DataError


def _ident(i: int) -> str:
    """Short identifier codes from the printable ASCII range 33-126 (IEEE 1364 18.2.1)."""
    chars = []
    i += 1
    while i:
        i, r = divmod(i - 1, 94)
        chars.append(chr(33 + r))
    return "".join(chars)


def _reference(text: str, used: set[str]) -> str:
    name = re.sub(r"[^A-Za-z0-9_]", "_", text) or "unit"
    if name[0].isdigit():
        name = "u_" + name
    base, k = name, 2
    while name in used:
        name, k = f"{base}_{k}", k + 1
    used.add(name)
    return name


def _comment(text: str) -> str:
    return " ".join(text.replace("$end", "$ end").split())


def write_vcd(
    store,
    out: TextIO,
    run_id: int,
    *,
    units: list[int] | None = None,
    t_ns: tuple[int, int] | None = None,
    cycles: tuple[int, int] | None = None,
) -> int:
    """Write the edges of `units` (default: every unit of the run) over a span; returns the edge count."""
    members = store.run_units(run_id)
    if units is not None:
        wanted = set(units)
        members = [m for m in members if m.unit.id in wanted]
        missing = wanted - {m.unit.id for m in members}
        if missing:
            raise DataError(f"run {run_id} has no unit {', '.join(map(str, sorted(missing)))}")
    if not members:
        raise DataError(f"run {run_id} has no units to export")
    if cycles is not None:  # one time span for every unit: from the first unit's cycle to the last's
        spans = [store.edges(m.unit.id, run_id=run_id, cycles=cycles) for m in members]
    else:
        spans = [store.edges(m.unit.id, run_id=run_id, t_ns=t_ns) for m in members]
    starts = [int(e.t_ns[0]) for e in spans if len(e)]
    t0 = t_ns[0] if t_ns is not None else (min(starts) if starts else 0)

    used: set[str] = set()
    w = out.write
    w(f"$date {datetime.now(UTC).strftime('%Y-%m-%d %H:%M:%S UTC')} $end\n")
    w(f"$version benchlog {__version__} $end\n")
    w(f"$comment run {run_id}; time 0 here is run time {t0} ns $end\n")
    w("$timescale 1 ns $end\n")
    w(f"$scope module run_{run_id} $end\n")
    codes = []
    for i, m in enumerate(members):
        code = _ident(i)
        codes.append(code)
        ref = _reference(f"ch{m.channel}_{m.unit.serial}", used)
        w(
            f"$comment {ref}: channel {m.channel}, unit {_comment(m.unit.serial)}, "
            f"lot {_comment(m.unit.lot)}, part {_comment(m.unit.part_number)} $end\n"
        )
        w(f"$var wire 1 {code} {ref} $end\n")
    w("$upscope $end\n$enddefinitions $end\n")
    w("#0\n$dumpvars\n")
    for code, e in zip(codes, spans, strict=True):
        w(f"{'x' if not len(e) else 1 - int(e.level[0])}{code}\n")
    w("$end\n")

    t = np.concatenate([e.t_ns for e in spans]) if spans else np.zeros(0, np.int64)
    lv = np.concatenate([e.level for e in spans]) if spans else np.zeros(0, np.uint8)
    who = np.concatenate([np.full(len(e), i) for i, e in enumerate(spans)]) if spans else np.zeros(0, int)
    order = np.argsort(t, kind="stable")
    t, lv, who = (t[order] - t0).tolist(), lv[order].tolist(), who[order].tolist()
    last = 0
    lines = []
    for ti, li, wi in zip(t, lv, who, strict=True):
        if ti != last:
            lines.append(f"#{ti}\n")
            last = ti
        lines.append(f"{li}{codes[wi]}\n")
    w("".join(lines))
    return len(t)
