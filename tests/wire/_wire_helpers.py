"""Shared helpers for the wire tests: record (de)serialisation for vectors and stream comparison."""

from __future__ import annotations

from benchlog.wire import (
    Announce,
    Beat,
    Drive,
    Edges,
    Fault,
    GoAccepted,
    Notice,
    PlanAccepted,
    Pong,
    SequenceGap,
    Unknown,
)


def flatten(records: list, keep_gaps: bool = False) -> list[tuple]:
    """Records as comparable rows, edges one per row, faults (and gaps unless asked) left out.

    Batching of edges and merging of faults depend on how the bytes were chunked; the rows do not.
    """
    rows: list[tuple] = []
    for r in records:
        if isinstance(r, Edges):
            rows.extend(
                ("E", int(c), int(v), int(t)) for c, v, t in zip(r.channel, r.level, r.tick, strict=True)
            )
        elif isinstance(r, Fault):
            continue
        elif isinstance(r, SequenceGap):
            if keep_gaps:
                rows.append(("gap", r.expected, r.received, r.frames_lost))
        else:
            rows.append((type(r).__name__, *(getattr(r, f) for f in r.__slots__)))
    return rows


def record_to_json(r) -> dict:
    match r:
        case Announce():
            return {
                "type": "announce",
                "version": r.version,
                "clock_hz": r.clock_hz,
                "counter_bits": r.counter_bits,
                "channels": r.channels,
                "board_id": r.board_id,
            }
        case Edges():
            return {
                "type": "edges",
                "edges": [
                    [int(c), int(v), int(t)] for c, v, t in zip(r.channel, r.level, r.tick, strict=True)
                ],
            }
        case Drive():
            d = {"type": "drive", "channel": r.channel, "level": r.level, "tick": r.tick}
            if r.cycle is not None:
                d["cycle"] = r.cycle
            return d
        case Beat():
            d = {"type": "beat", "tick": r.tick, "captured": r.captured, "dropped": r.dropped}
            if r.short is not None:
                d["short"] = r.short
                d["cycles"] = [[c, n] for c, n in r.cycles]
            return d
        case PlanAccepted():
            return {
                "type": "plan_accepted",
                "channel": r.channel,
                "on_us": r.on_us,
                "off_us": r.off_us,
                "cycles": r.cycles,
            }
        case GoAccepted():
            return {"type": "go_accepted", "channels": list(r.channels), "tick": r.tick}
        case Notice():
            return {"type": "notice", "text": r.text}
        case Pong():
            return {"type": "pong", "token": r.token}
        case Unknown():
            return {"type": "unknown", "type_code": r.type_code}
    raise TypeError(r)


def record_from_json(d: dict):
    kind = d["type"]
    if kind == "announce":
        return Announce(d["version"], d["clock_hz"], d["counter_bits"], d["channels"], d["board_id"])
    if kind == "edges":
        return Edges.of([tuple(e) for e in d["edges"]])
    if kind == "drive":
        return Drive(d["channel"], d["level"], d["tick"], d.get("cycle"))
    if kind == "beat":
        cycles = tuple((c, n) for c, n in d.get("cycles", []))
        return Beat(d["tick"], d["captured"], d["dropped"], d.get("short"), cycles)
    if kind == "plan_accepted":
        return PlanAccepted(d["channel"], d["on_us"], d["off_us"], d["cycles"])
    if kind == "go_accepted":
        return GoAccepted(tuple(d["channels"]), d["tick"])
    if kind == "notice":
        return Notice(d["text"])
    if kind == "pong":
        return Pong(d["token"])
    if kind == "unknown":
        return Unknown(d["type_code"])
    raise ValueError(kind)
