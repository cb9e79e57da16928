"""`benchlog qualify`: may the candidate lot replace the incumbent? A verdict table and an exit code."""

from __future__ import annotations

import argparse

from benchlog.views.cli._args import non_negative, number_within, positive

NAME = "qualify"
HELP = "Judge a candidate lot against a part spec and the incumbent lot: pass, fail or not yet decidable."

EPILOG = """\
LOT is PART:LOT (e.g. VS-505:L1), a lot code held by one part, or a part number (all its lots pooled).
Exit status: 0 pass, 1 fail, 2 not yet decidable (not enough data); 64 a usage error; other codes are
errors (6 store, 8 spec, 10 data: e.g. an unknown lot).
"""


def usage_errors_exit_64(p: argparse.ArgumentParser) -> None:
    """A usage error exits 64 (EX_USAGE of sysexits.h), so that exit 2 only ever means "not enough
    data" to a script gating on the verdict."""
    import sys

    def error(message: str) -> None:
        p.print_usage(sys.stderr)
        p.exit(64, f"benchlog: error: {message}\n")

    p.error = error  # type: ignore[method-assign]


def add_common(p: argparse.ArgumentParser) -> None:
    """Options `qualify` and `report` share."""
    usage_errors_exit_64(p)
    p.add_argument("--incumbent", required=True, metavar="LOT", help="the lot in use today")
    p.add_argument("--candidate", required=True, metavar="LOT", help="the lot that would replace it")
    p.add_argument(
        "--spec", help="part spec file or shipped part number (default: the candidate part's stored spec)"
    )
    p.add_argument("--db", help="store URL or SQLite path (default: $BENCHLOG_DB, then ./benchlog.sqlite)")
    p.add_argument(
        "--confidence",
        type=number_within(0.5, 1),
        help="one-sided confidence of every bound (default: the spec's life confidence, else 0.9)",
    )
    p.add_argument(
        "--reliability",
        type=number_within(0.5, 1),
        default=0.9,
        help="the life requirement is the life at this reliability (default 0.9: B10)",
    )
    p.add_argument(
        "--margin",
        type=non_negative,
        default=0.2,
        help="how much worse than the incumbent a metric may be, as a fraction (default 0.2)",
    )
    p.add_argument("--no-comparison", action="store_true", help="judge the candidate against the spec only")
    p.add_argument(
        "--assumed-shape",
        type=positive,
        metavar="BETA",
        help="Weibull shape for a Weibayes life bound when too few units failed",
    )
    p.add_argument(
        "--min-units", type=int, default=5, help="units a lot needs before a metric claim is made (default 5)"
    )
    p.add_argument(
        "--per",
        choices=("cycle", "actuation"),
        default="cycle",
        help="what one operation is in failure rates: an operating cycle (the spec's own word for it), "
        "or each make and each break",
    )
    p.add_argument("--resamples", type=int, default=2000, help="bootstrap resamples (default 2000)")
    p.add_argument("--seed", type=int, default=0, help="bootstrap random seed (default 0)")


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.epilog = EPILOG
    p.formatter_class = argparse.RawDescriptionHelpFormatter
    add_common(p)
    p.add_argument("--json", metavar="FILE", help="also write the full result as JSON ('-' for stdout)")


def evaluate(args: argparse.Namespace, *, with_runs: bool = False):
    from benchlog.views.report import evaluate as evaluate_lots

    return evaluate_lots(
        args.db,
        args.incumbent,
        args.candidate,
        spec=args.spec,
        confidence=args.confidence,
        reliability=args.reliability,
        margin=None if args.no_comparison else args.margin,
        assumed_shape=args.assumed_shape,
        min_units=args.min_units,
        per=args.per,
        resamples=args.resamples,
        seed=args.seed,
        with_runs=with_runs,
    )


def verdict_table(q) -> str:
    head = ("criterion", "measured [bounds]", "required", "conf.", "result")
    rows = [(c.name, c.measured, c.required, f"{c.confidence:.0%}", c.outcome) for c in q.criteria]
    widths = [max(len(r[i]) for r in [head, *rows]) for i in range(len(head))]
    line = "  ".join("-" * w for w in widths)
    out = ["  ".join(h.ljust(w) for h, w in zip(head, widths, strict=True)), line]
    out += ["  ".join(v.ljust(w) for v, w in zip(r, widths, strict=True)) for r in rows]
    return "\n".join(s.rstrip() for s in out)


def run(args: argparse.Namespace) -> int:
    import json
    import sys

    ev = evaluate(args)
    q, inc, cand, spec_name = ev.qualification, ev.incumbent, ev.candidate, ev.spec_name
    conf = q.requirements.confidence
    out = sys.stderr if args.json == "-" else sys.stdout  # '--json -': stdout carries only the JSON

    def say(text: str = "") -> None:
        print(text, file=out)

    say(
        f"candidate {cand.label}, {len(cand.serial_of)} units; "
        f"incumbent {inc.label}, {len(inc.serial_of)} units"
    )
    say(f"spec: {spec_name}; every bound one-sided at {conf:.0%}; units are the experimental unit")
    say()
    say(verdict_table(q))
    notes = [(c.name, c.note) for c in q.criteria if c.note]
    settle = [(c.name, c.to_settle) for c in q.criteria if c.to_settle]
    if settle:
        say("\nto settle what is undecided:")
        for name, text in settle:
            say(f"  {name}: {text}")
    if notes:
        say("\nnotes:")
        for name, text in notes:
            say(f"  {name}: {text}")
    say(f"\nverdict: {q.outcome.upper()} (exit {q.exit_code})")
    if args.json:
        doc = q.to_dict()
        doc["spec"] = spec_name
        doc["lots"] = {"incumbent": inc.label, "candidate": cand.label}
        text = json.dumps(doc, indent=2)
        if args.json == "-":
            sys.stdout.write(text + "\n")
        else:
            from benchlog.errors import ConfigError

            try:
                with open(args.json, "w", encoding="utf-8") as fh:
                    fh.write(text + "\n")
            except OSError as exc:
                raise ConfigError(f"cannot write {args.json}: {exc.strerror or exc}") from exc
    return q.exit_code
