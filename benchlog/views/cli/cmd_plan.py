"""`benchlog plan`: units and cycles a zero-failure demonstration needs, and what would settle a
running life test."""

from __future__ import annotations

import argparse

from benchlog.views.cli._args import fraction, non_negative, positive

NAME = "plan"
HELP = "Plan a life demonstration (success run, Weibayes) or say what would settle a running test."

EPILOG = """\
Without --lot: how many units must all survive (success run), and with --life and --shape how long
each must run (Weibayes, shape assumed known). With --lot (and --db): the lot's life so far from the
store, and how many more cycles on its running units, with no further failure, would show the life.
With --oc: the chance that the comparison with the incumbent passes (a percentile of the candidate at
most 1 + --margin times the incumbent's, at the confidence) as a function of the candidate's true
ratio, for 8, 16 and 32 units (or --units and its half and double), simulated from the incumbent's
recorded units (--incumbent, from the store) or from assumed spreads (--unit-spread, --spread).
"""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.epilog = EPILOG
    p.formatter_class = argparse.RawDescriptionHelpFormatter
    p.add_argument(
        "--spec",
        help="part spec (file or shipped part number): life and confidence from it (default with --lot: "
        "the part's stored spec)",
    )
    p.add_argument(
        "--confidence", type=fraction, help="confidence to demonstrate (default: spec's, else 0.9)"
    )
    p.add_argument(
        "--reliability",
        type=fraction,
        default=0.9,
        help="reliability to demonstrate at the life (default 0.9, i.e. the B10 life)",
    )
    p.add_argument(
        "--life", type=positive, metavar="CYCLES", help="the life to demonstrate (default: spec's)"
    )
    p.add_argument("--shape", type=positive, metavar="BETA", help="assumed Weibull shape (Weibayes)")
    p.add_argument("--units", type=int, help="units available: how long must each run")
    p.add_argument("--cycles", type=positive, help="cycles each unit can run: how many units are needed")
    p.add_argument("--failures", type=int, default=0, help="failures the plan may allow (default 0)")
    p.add_argument("--lot", help="a running test's lot (PART:LOT, lot code or part number) in the store")
    p.add_argument("--db", help="store URL or SQLite path (default: $BENCHLOG_DB, then ./benchlog.sqlite)")
    oc = p.add_argument_group("operating characteristic (--oc)")
    oc.add_argument("--oc", action="store_true", help="simulate the chance the comparison passes")
    oc.add_argument("--incumbent", metavar="LOT", help="the incumbent's lot in the store: its units' spread")
    oc.add_argument(
        "--metric", default=None, help="metric compared (default: the spec's first, else make_bounce)"
    )
    oc.add_argument("--margin", type=non_negative, default=0.2, help="how much worse may pass (default 0.2)")
    oc.add_argument(
        "--unit-spread",
        type=non_negative,
        default=0.25,
        help="log-sd of unit medians, no data (default 0.25)",
    )
    oc.add_argument(
        "--spread", type=positive, default=0.4, help="log-sd of one unit's actuations, no data (default 0.4)"
    )
    oc.add_argument(
        "--populations", type=int, default=300, help="simulated pairs of lots a point (default 300)"
    )
    oc.add_argument("--seed", type=int, default=0, help="simulation seed (default 0)")


def run(args: argparse.Namespace) -> int:
    import math

    from benchlog.errors import DataError, UsageError
    from benchlog.stats import (
        fit_weibull,
        life_top_up,
        success_run_units,
        weibayes_bx_lower,
        weibayes_test_cycles,
        weibayes_units,
    )

    if args.failures < 0:
        raise UsageError("--failures cannot be negative")
    if args.units is not None and args.units < 1:
        raise UsageError("--units must be at least 1")
    lot = None
    if args.lot:
        from benchlog.store import Store
        from benchlog.views.report._data import load_lot

        store = Store.open(args.db, readonly=True)
        try:
            lot = load_lot(store, args.lot, with_runs=False)
        finally:
            store.close()
    life, conf = args.life, args.confidence
    spec = None
    if args.spec:
        from benchlog.analysis import load_spec

        spec = load_spec(args.spec)
    elif lot is not None and lot.spec_toml and not (life and conf):
        from benchlog.views.report._data import spec_for

        spec, _ = spec_for(None, lot)  # the part's stored spec, as qualify uses it
    if spec is not None:
        if spec.life is not None:
            life = life or float(spec.life.min_cycles)
            conf = conf or spec.life.confidence
    conf = conf or 0.9
    rel = args.reliability
    if lot is not None and not life:
        from benchlog.errors import SpecError

        raise SpecError(
            f"{lot.label}: no life to show: give --life or --spec (the store holds no spec with a life "
            f"for {lot.part_number})"
        )
    x = 100 * (1 - rel)
    print(
        f"demonstrate: reliability {rel:.4g} (B{x:g} life) at {conf:.0%} confidence, "
        f"{args.failures} failure(s) allowed"
    )
    n = success_run_units(conf, rel, args.failures)
    print(
        f"success run: {n} units, each surviving the full life"
        + (f" of {life:,.0f} cycles" if life else "")
        + " (n = ln(1 - C) / ln R when no failure is allowed)"
    )
    if spec is not None:
        per_unit = _unit_limits(spec)
        if per_unit:
            k = success_run_units(conf, rel)
            print(
                f"limits on each unit ({', '.join(per_unit)}): {k} units with none beyond for qualify to "
                f"pass them (the same success run: at most {1 - rel:.0%} of units beyond); fewer leave "
                "them not yet decidable"
            )
        rates = _rate_limits(spec)
        if rates:
            from benchlog.stats._verdict import RATE_COMPARE_UNITS

            print(
                f"comparison with the incumbent ({', '.join(rates)}, candidate - incumbent): "
                f"{RATE_COMPARE_UNITS} units in each lot; fewer leave it not yet decidable"
            )
    if life and args.shape:
        beta = args.shape
        print(
            f"\nWeibayes, shape {beta:g} assumed, life {life:,.0f} cycles: "
            "t = L * (ln(1 - C) / (n ln R))^(1/beta)"
        )
        if args.units:
            t = weibayes_test_cycles(args.units, life, rel, conf, beta, args.failures)
            print(f"  {args.units} units: {math.ceil(t):,} cycles each")
        if args.cycles:
            k = weibayes_units(args.cycles, life, rel, conf, beta, args.failures)
            print(f"  {args.cycles:,.0f} cycles each: {k} units")
        if not (args.units or args.cycles):
            print("  units   cycles each")
            for k in (4, 8, 12, 16, 24, 32, 48):
                print(
                    f"  {k:5d}   {math.ceil(weibayes_test_cycles(k, life, rel, conf, beta, args.failures)):,}"
                )
    elif life and not args.lot:
        print(
            "\n(give --shape for a Weibayes plan: fewer units each running longer than the life, "
            "or the reverse)"
        )
    if args.oc:
        _operating_characteristic(args, conf)
    if lot is not None:
        table = lot.population.life
        if table is None or not len(table):
            raise DataError(f"{lot.label}: no unit has cycled yet")
        alive = int((~table.failed).sum())
        print(
            f"\nrunning test {lot.label}: {len(table)} units, {table.failures} failed, {alive} running, "
            f"{table.cycles.sum():,.0f} unit-cycles"
        )
        beta = args.shape
        try:
            fit = fit_weibull(table)
            lo = fit.bx_lower_matching(x, conf)
            print(
                f"  Weibull fit: shape {fit.shape:.3g}, scale {fit.scale:,.0f}; B{x:g} lower bound "
                f"{lo:,.0f} cycles (matching prior)"
            )
            beta = beta or fit.shape
        except DataError as exc:
            print(f"  {exc}")
        if not beta:
            print("  give --shape: with so few failures the shape must be assumed (Weibayes)")
            return 0
        low = weibayes_bx_lower(table, beta, x, conf)
        print(f"  Weibayes (shape {beta:.3g}): B{x:g} lower bound {low:,.0f} cycles; required {life:,.0f}")
        top = life_top_up(table.cycles, table.failed, life, rel, conf, beta)
        if top.more_cycles == 0:
            print("  already shown")
        elif math.isfinite(top.more_cycles):
            print(
                f"  {top.more_cycles:,.0f} more cycles on each of the {top.survivors} running units, "
                "with no further failure, would show it"
            )
        else:
            print("  no unit is still running: more units are needed")
    return 0


def _operating_characteristic(args: argparse.Namespace, conf: float) -> None:
    import sys

    from benchlog.errors import DataError, UsageError
    from benchlog.stats import METRICS, UnitModel, operating_characteristic

    metric, pct = args.metric, 95.0
    if args.spec:
        from benchlog.analysis import load_spec

        spec = load_spec(args.spec)
        lims = [lim for lim in spec.limits if lim.metric in METRICS and lim.percentile < 100]
        if metric is None and lims:
            metric, pct = lims[0].metric, float(lims[0].percentile)
        else:
            pct = next((float(lim.percentile) for lim in lims if lim.metric == metric), 95.0)
    metric = metric or "make_bounce"
    if metric not in METRICS or METRICS[metric].kind != "percentile":
        known = ", ".join(k for k, m in METRICS.items() if m.kind == "percentile")
        raise UsageError(f"--metric: {metric!r} is not a percentile metric ({known})")
    if args.populations < 20:
        raise UsageError("--populations must be at least 20")
    if args.incumbent:
        from benchlog.store import Store
        from benchlog.views.report._data import load_lot

        store = Store.open(args.db, readonly=True)
        try:
            lot = load_lot(store, args.incumbent, with_runs=False)
        finally:
            store.close()
        sample = lot.population.samples.get(metric)
        if sample is None or not len(sample):
            raise DataError(f"{lot.label}: no {METRICS[metric].label} recorded")
        model = UnitModel.from_sample(sample)
    else:
        model = UnitModel.assumed(args.unit_spread, args.spread)
    if args.units:
        units = tuple(sorted({max(3, args.units // 2), max(3, args.units), 2 * args.units}))
    else:
        units = (8, 16, 32)
    tty = sys.stderr.isatty()

    def progress(done: int, total: int) -> None:
        if tty:
            print(f"\rsimulating: {done}/{total} points", end="" if done < total else "\n", file=sys.stderr)

    cycles = int(args.cycles) if args.cycles else 1000
    oc = operating_characteristic(
        model,
        units,
        cycles=cycles,
        margin=args.margin,
        confidence=conf,
        percentile=pct,
        populations=args.populations,
        seed=args.seed,
        progress=progress,
    )
    label = METRICS[metric].label
    print(
        f"\noperating characteristic: P(pass) of '{label} p{pct:g}, candidate / incumbent <= "
        f"{1 + args.margin:.2f}' at {conf:.0%} confidence"
    )
    print(f"  units drawn from {model.source}; {args.populations} simulated pairs of lots a point")
    print("  true ratio " + "".join(f"{d:>7.2f}" for d in oc.ratios))
    for i, n in enumerate(oc.units):
        print(f"  {n:4d} units " + "".join(f"{p:7.2f}" for p in oc.pass_share[i]))
    print(f"\n  P(pass), {oc.units[-1]} units ('#') and {oc.units[0]} units ('.'), 0 to 1:")
    width = 40
    for j, d in enumerate(oc.ratios):
        hi, lo = oc.pass_share[-1, j], oc.pass_share[0, j]
        bar = "".join(
            "#" if k < round(hi * width) else ("." if k < round(lo * width) else " ") for k in range(width)
        )
        guard = "  <- the guarded margin" if abs(d - (1 + args.margin)) < 1e-9 else ""
        print(f"  {d:5.2f} |{bar}| {hi:.2f}{guard}")
    at = [k for k, d in enumerate(oc.ratios) if abs(d - (1 + args.margin)) < 1e-9]
    if at:
        worst = float(oc.pass_share[:, at[0]].max())
        print(
            f"  at a true ratio of {1 + args.margin:.2f} it passes at most {worst:.0%} of the time "
            f"(at most {1 - conf:.0%} intended, simulation error about "
            f"{(conf * (1 - conf) / args.populations) ** 0.5:.0%})"
        )


def _unit_limits(spec) -> list[str]:
    """The spec's limits qualify judges on each unit: a limit on every actuation, the chatter limit."""
    from benchlog.stats import Requirements

    return [lim.name for lim in Requirements.from_spec(spec).limits if lim.on_each_unit]


def _rate_limits(spec) -> list[str]:
    """The spec's limits on a rate (chatter), which qualify compares with the incumbent as a difference."""
    from benchlog.stats import Requirements

    return [lim.name for lim in Requirements.from_spec(spec).limits if lim.is_rate]
