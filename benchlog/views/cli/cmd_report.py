"""`benchlog report`: write the self-contained HTML qualification report."""

from __future__ import annotations

import argparse

from benchlog.views.cli.cmd_qualify import EPILOG, add_common

NAME = "report"
HELP = "Write a self-contained HTML qualification report (verdict, plots, life, runs, the spec used)."


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.epilog = EPILOG.replace("Exit status", "Exit status (as for qualify)")
    p.formatter_class = argparse.RawDescriptionHelpFormatter
    add_common(p)
    p.add_argument("-o", "--output", default="qualification.html", help="HTML file to write")


def run(args: argparse.Namespace) -> int:
    import os
    import tempfile

    from benchlog.errors import ConfigError
    from benchlog.views.cli.cmd_qualify import evaluate
    from benchlog.views.report import render_report

    q, inc, cand, spec, spec_name = evaluate(args, with_runs=True)
    text = ""
    if args.spec and os.path.exists(args.spec):
        with open(args.spec, encoding="utf-8", errors="replace") as fh:
            text = fh.read()
    elif args.spec:  # a shipped spec, by part number
        from importlib import resources

        text = resources.files("benchlog.presets").joinpath("specs", f"{args.spec}.toml").read_text("utf-8")
    elif cand.spec_toml:
        text = cand.spec_toml
    page = render_report(q, inc, cand, spec_name=spec_name, spec_text=text or repr(spec))
    out = os.path.abspath(args.output)
    try:  # write beside the target, then rename: a half-written report never replaces a good one
        fd, tmp = tempfile.mkstemp(prefix=".report-", suffix=".html", dir=os.path.dirname(out))
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(page)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        os.replace(tmp, out)
    except OSError as exc:
        raise ConfigError(f"cannot write {args.output}: {exc.strerror or exc}") from exc
    print(f"wrote {args.output}: verdict {q.outcome} (exit {q.exit_code})")
    return q.exit_code
