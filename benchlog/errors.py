"""The one error tree benchlog raises across its public surface.

```
BenchlogError                 any error benchlog reports to a user
 +-- PortError                a serial port or URL cannot be opened, or was lost for good
 +-- ProtocolError            the sampler spoke something the host cannot work with at all
 +-- StoreError               the database cannot be opened, migrated, read or written
 |    +-- StoreBusyError      another recorder holds the run or bench
 |    +-- StoreUnreachable    no connection to the database server (it may come back)
 +-- SpecError                a part spec file is missing or malformed (names file, key, expectation)
 +-- ConfigError              a malformed or unusable configuration or input file (preset, settings)
 +-- DataError                not enough or inconsistent data for the asked analysis
 +-- UsageError               options a command cannot take together, or a value it cannot use
```

Damaged bytes on the wire are *not* errors: the decoder counts them as faults and goes on. Errors from
dependencies (pyserial, SQLAlchemy, tomllib) are wrapped at the boundary with `raise ... from exc`. The
command line turns each into one line on stderr and an exit code (`exit_code`).
"""

from __future__ import annotations


class BenchlogError(Exception):
    """Base of every error benchlog reports."""

    exit_code = 3

    def __str__(self) -> str:  # one line, always, with any control character written out
        from benchlog._inert import inert

        return inert(" ".join(super().__str__().split()))


class PortError(BenchlogError):
    exit_code = 4


class ProtocolError(BenchlogError):
    exit_code = 5


class StoreError(BenchlogError):
    exit_code = 6


class StoreBusyError(StoreError):
    exit_code = 7


class StoreUnreachable(StoreError):
    """No connection could be made to the database: an outage, not a wrong or damaged database."""


class SpecError(BenchlogError):
    exit_code = 8


class ConfigError(BenchlogError):
    exit_code = 9


class DataError(BenchlogError):
    exit_code = 10


class UsageError(BenchlogError):
    """The same exit status as the command line's own parse errors (EX_USAGE of sysexits.h)."""

    exit_code = 64


__all__ = [
    "BenchlogError",
    "PortError",
    "ProtocolError",
    "StoreError",
    "StoreBusyError",
    "StoreUnreachable",
    "SpecError",
    "ConfigError",
    "DataError",
    "UsageError",
]
