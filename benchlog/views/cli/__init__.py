"""The `benchlog` command line.

Every command is a module `cmd_<name>.py` in this package exposing:

- `NAME` (the subcommand), `HELP` (one line), `add_arguments(parser)`;
- `run(args) -> int` (the exit code).

Commands import heavy libraries inside `run`, so `benchlog --help` stays fast. Errors from the tree in
`benchlog.errors` become one line on stderr and their exit code; nothing prints a traceback unless
`BENCHLOG_DEBUG=1` is set.
"""

from __future__ import annotations

import argparse
import importlib
import os
import pkgutil
import sys
from collections.abc import Sequence
from types import ModuleType

from benchlog import __version__
from benchlog.errors import BenchlogError
from benchlog.views.cli._exit import EXIT_TABLE, USAGE, epilog

__all__ = ["main", "build_parser"]


def _command_modules() -> list[ModuleType]:
    names = sorted(m.name for m in pkgutil.iter_modules(__path__) if m.name.startswith("cmd_"))
    return [importlib.import_module(f"{__name__}.{n}") for n in names]


def _named_command(argv: Sequence[str]) -> list[ModuleType] | None:
    """The module of the command `argv` names, when it names one: running a command needs no other
    command's module (each imports its own), so start-up stays short."""
    name = argv[0] if argv else ""
    if not name.isidentifier() or not any(
        os.path.isfile(os.path.join(d, f"cmd_{name}.py")) for d in __path__
    ):
        return None
    return [importlib.import_module(f"{__name__}.cmd_{name}")]


class _OneLineParser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(USAGE, f"benchlog: error: {message} (see: {self.prog} --help)\n")


def build_parser(modules: list[ModuleType] | None = None) -> argparse.ArgumentParser:
    parser = _OneLineParser(
        prog="benchlog",
        description="Record, measure and qualify mechanical switches and relays on a sampler bench.",
        epilog=EXIT_TABLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"benchlog {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_OneLineParser)
    for mod in _command_modules() if modules is None else modules:
        p = sub.add_parser(
            mod.NAME,
            help=mod.HELP,
            description=mod.HELP,
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )
        mod.add_arguments(p)
        p.epilog = epilog(p.epilog)
        p.set_defaults(_run=mod.run)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    from benchlog.views.cli._signals import raise_on_stop_signals

    # numpy's BLAS would start a thread per core at import, costing every command CPU at start-up
    # and a recorder on the same PC its cores; benchlog's linear algebra is a few parameters at a time
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    args_in = sys.argv[1:] if argv is None else list(argv)
    parser = build_parser(_named_command(args_in))
    args = parser.parse_args(args_in)
    if not getattr(args, "_run", None):
        parser.print_help()
        return USAGE
    try:
        with raise_on_stop_signals():  # SIGTERM and SIGHUP end a command as Ctrl-C does
            return int(args._run(args) or 0)
    except BenchlogError as exc:
        print(f"benchlog: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("benchlog: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
    except Exception as exc:  # last line of defence: one line, never a traceback
        if os.environ.get("BENCHLOG_DEBUG"):
            raise
        print(
            f"benchlog: internal error: {type(exc).__name__}: {exc} (set BENCHLOG_DEBUG=1 for details)",
            file=sys.stderr,
        )
        return 70
