"""A plain-text summary of a store, from the same reads the dashboard makes (for no terminal)."""

from __future__ import annotations

from benchlog.views._times import failure_time_text, first_break_text, first_drift_text

from ._data import TrendCache, cycles_text, duration_text, read_overview, read_run, value_text


def summary_text(store, runs: int = 5) -> str:
    """The newest `runs` runs and their units: life, bounce, verdict and drift, in plain text."""
    ov = read_overview(store, limit=runs)
    if not ov.runs:
        return "No runs recorded in this database yet."
    out: list[str] = []
    cache = TrendCache.complete()  # printed once: nothing left out for time
    for row in ov.runs:
        r = row.run
        target = cycles_text(r.target_cycles) if r.target_cycles else "open"
        line = (
            f"run {r.id} on {r.bench}: {row.state.upper()} ({row.how}), cycles {cycles_text(r.cycles_done)}"
            f"/{target}, units {r.units} ({r.units_failed} failed), incidents {r.incidents}"
        )
        if row.outage is not None:
            line += f", link down {row.outage.count}x (longest {duration_text(row.outage.longest_s)})"
        out.append(line)
        detail = read_run(store, r.id, cache)
        out.append(
            f"  {'ch':>2} {'unit':<16} {'cycles':>7} {'life':<28} {'verdict':<8} "
            f"{'make p95/max ms':>15} {'break p95/max ms':>16}  drift"
        )
        for u in detail.units:
            f_m, f_b = u.figures["make_bounce"], u.figures["break_bounce"]
            drift = "; ".join(d.short for d in u.drift if d.signalled) or "steady"
            out.append(
                f"  {u.channel:>2} {u.unit.serial:<16} {cycles_text(u.unit.cycles):>7} {u.life_text:<28} "
                f"{u.verdict_label:<8} {value_text(f_m.p95) + '/' + value_text(f_m.max):>15} "
                f"{value_text(f_b.p95) + '/' + value_text(f_b.max):>16}  {drift}"
            )
            if u.unit.status == "failed":
                cycle = u.unit.failed_at_cycle or u.unit.cycles
                out.append(f"     failed at cycle {cycle:,}: {failure_time_text(u.unit)}")
            for when in (first_break_text(u.unit), first_drift_text(u.unit)):
                if when:
                    out.append(f"     {when}")
    return "\n".join(out)
