"""The one exit-status table every command shares (docs/commands.md), printed under every `--help`."""

from __future__ import annotations

OK = 0
JUDGED_FAIL = 1
UNDECIDED = 2
USAGE = 64  # EX_USAGE of sysexits.h: never mistaken for "not yet decidable" (2)
INTERNAL = 70  # EX_SOFTWARE of sysexits.h
INTERRUPTED = 130  # 128 + SIGINT, as shells report it

EXIT_TABLE = """\
Exit status (every command):
  0  done; a judgement passed        6  store error (7: the bench or run is busy)
  1  a judgement failed              8  part spec missing or malformed
  2  not yet decidable (too little   9  a configuration or input file is unusable
     data for a verdict)            10  not enough or inconsistent data
  3  other error                    64  usage: unknown option, bad value, options that clash
  4  serial port unusable or lost   70  internal error (a bug: BENCHLOG_DEBUG=1 shows it)
  5  sampler protocol unusable     130  interrupted (Ctrl-C)
"""


def epilog(own: str | None) -> str:
    """A command's own notes (what 0, 1 and 2 mean for it), then the shared table."""
    return f"{own.rstrip()}\n\n{EXIT_TABLE}" if own else EXIT_TABLE


__all__ = ["EXIT_TABLE", "INTERNAL", "INTERRUPTED", "JUDGED_FAIL", "OK", "UNDECIDED", "USAGE", "epilog"]
