"""When things happened, as the views show them: local time with its UTC offset on screen, UTC in exports.

The store keeps wall-clock times in UTC and run times in ns of the run's own (sampler) clock."""

from __future__ import annotations

from datetime import UTC, datetime

NOT_RECORDED = "time not recorded"


def local_text(at: datetime | None) -> str:
    """`2026-12-03 03:14:07 +01:00` in the process's local time zone (TZ), or "time not recorded"."""
    if at is None:
        return NOT_RECORDED
    if at.tzinfo is None:
        at = at.replace(tzinfo=UTC)
    local = at.astimezone()
    off = local.utcoffset()
    minutes = int(off.total_seconds() // 60) if off is not None else 0
    sign = "-" if minutes < 0 else "+"
    minutes = abs(minutes)
    return f"{local:%Y-%m-%d %H:%M:%S} {sign}{minutes // 60:02d}:{minutes % 60:02d}"


def utc_text(at: datetime | None) -> str:
    """ISO 8601 in UTC with a Z (`2026-12-03T02:14:07.250000Z`), or "" when not recorded."""
    if at is None:
        return ""
    if at.tzinfo is None:
        at = at.replace(tzinfo=UTC)
    return at.astimezone(UTC).replace(tzinfo=None).isoformat(timespec="microseconds") + "Z"


def run_time_text(t_ns: int | None) -> str:
    """A run time as h:mm:ss.mmm of the run's clock, or "" when not known."""
    if t_ns is None:
        return ""
    ms = int(t_ns) // 1_000_000
    s, ms = divmod(ms, 1000)
    return f"{s // 3600}:{s % 3600 // 60:02d}:{s % 60:02d}.{ms:03d}"


def event_time_text(at: datetime | None, run_id: int | None, t_ns: int | None) -> str:
    """`2026-12-03 03:14:07 +01:00, run 4 at 0:12:03.250` (either part missing says so)."""
    where = f"run {run_id} at {run_time_text(t_ns)}" if run_id is not None and t_ns is not None else ""
    if at is None:
        return f"{NOT_RECORDED} ({where})" if where else NOT_RECORDED
    return f"{local_text(at)}, {where}" if where else local_text(at)


def failure_time_text(unit) -> str:
    """When a failed unit (`UnitInfo`) failed, for the screens and the printed summary."""
    return event_time_text(unit.failed_at, unit.run_id, unit.failed_at_ns)


def first_break_text(unit) -> str | None:
    """`first out of spec at cycle N: <time>`, or None when the unit never broke its spec."""
    if unit.first_break_cycle is None:
        return None
    when = event_time_text(unit.first_break_at, unit.first_break_run_id, unit.first_break_ns)
    return f"first out of spec at cycle {unit.first_break_cycle:,}: {when}"


DRIFT_WORDS = {
    "make_bounce": "make bounce",
    "break_bounce": "break bounce",
    "operate_time": "operate time",
    "release_time": "release time",
}


def first_drift_text(unit) -> str | None:
    """`drift first flagged at cycle N (make bounce): <time>`, or None when the recorder never flagged
    the unit's drift (or the store predates revision 0008)."""
    if unit.first_drift_cycle is None:
        return None
    what = DRIFT_WORDS.get(unit.first_drift_metric or "", unit.first_drift_metric or "?")
    when = event_time_text(unit.first_drift_at, unit.first_drift_run_id, unit.first_drift_ns)
    return f"drift first flagged at cycle {unit.first_drift_cycle:,} ({what}): {when}"
