"""`benchlog qualify`: may the candidate lot replace the incumbent? A verdict table and an exit code."""

from __future__ import annotations

import argparse

from benchlog.views.cli._args import JSON_HELP, add_output, non_negative, number_within, positive

NAME = "qualify"
HELP = "Judge a candidate lot against a part spec and the incumbent lot: pass, fail or not yet decidable."

EPILOG = """\
LOT is PART:LOT (e.g. VS-505:L1), a lot code held by one part, or a part number (all its lots pooled).
The verdict is the exit status: 0 pass, 1 fail, 2 not yet decidable (not enough data); a usage error
is 64, never 2. With --json the table goes to standard error and standard output (or -o FILE) carries
only the JSON document.
"""


def add_common(p: argparse.ArgumentParser) -> None:
    """Options `qualify` and `report` share."""
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
    p.add_argument("--json", action="store_true", help=JSON_HELP + " (the table goes to standard error)")
    add_output(p, "write to FILE instead of standard output")


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
    lines: list[str] = []

    def say(text: str = "") -> None:
        lines.append(text)

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
    table = "\n".join(lines) + "\n"
    if args.json:
        doc = q.to_dict()
        doc["spec"] = spec_name
        doc["lots"] = {"incumbent": inc.label, "candidate": cand.label}
        sys.stderr.write(table)  # standard output carries only the JSON document
        text = json.dumps(doc, indent=2) + "\n"
    else:
        text = table
    if args.output:
        from benchlog.errors import ConfigError

        try:
            with open(args.output, "w", encoding="utf-8") as fh:
                fh.write(text)
        except OSError as exc:
            raise ConfigError(f"cannot write {args.output}: {exc.strerror or exc}") from exc
        print(f"wrote {args.output}: verdict {q.outcome} (exit {q.exit_code})", file=sys.stderr)
    else:
        sys.stdout.write(text)
    return q.exit_code
