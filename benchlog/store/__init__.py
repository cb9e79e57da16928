"""The life-cycle store: every unit's whole life in one database (SQLite file or PostgreSQL).

Open with `Store.open(db=None, readonly=False)`; `db` is an URL or a SQLite path, defaulting to
`$BENCHLOG_DB`, then `./benchlog.sqlite`. Readers (dashboard, statistics, export) open read-only.

Read API (all on `Store`; see docs/store.md):

- `parts()`, `lots(part=None)`, `units(part=None, lot=None, ids=None)` -> catalogue dataclasses
- `benches()` -> list[BenchInfo]; `runs(bench=None, state=None, limit=None)`, `run(run_id)` -> RunInfo
- `run_units(run_id)` -> list[RunUnitInfo] (channel, unit with life status, latest rollups)
- `trend(unit_id, metric, kind=MAKE, run_id=None)` -> Trend (numpy arrays, one point per window)
- `actuations(units=, lots=, parts=, runs=, kind=, cycles=)` -> numpy STORED_ACTUATION_DTYPE
- `edges(unit_id, run_id=None, t_ns=None, cycles=None)` -> TimedEdges
- `incidents(run_id, kind=None)` -> list[IncidentInfo]
- `life_table(part=None, lot=None)` -> LifeTable (cycles, failed, mode per unit: failures and suspensions)
- `summaries(units=, lots=, parts=, runs=, series=)` -> {series: SeriesSummary} (merged histograms)
- `summary_windows(series, units=, percentiles=)` -> per unit and window: count and percentiles

Writing: `register_part/lot/unit/bench`, `start_run(...)` / `resume_run(run_id)` -> RunWriter.
"""

from __future__ import annotations

from ._engine import DEFAULT_FILE, ENV_VAR, SQLITE_PRAGMAS, make_engine, resolve_url
from ._migrate import SchemaStatus, head_revision, migrations_dir
from ._read import (
    KIND_NAMES,
    LIFE_DTYPE,
    BenchInfo,
    IncidentInfo,
    LifeTable,
    LotInfo,
    PartInfo,
    RollupPoint,
    RunInfo,
    RunUnitInfo,
    Trend,
    UnitInfo,
)
from ._schema import (
    ALIVE,
    END_ALL_FAILED,
    END_ERROR,
    END_IDLE,
    END_PORT_LOST,
    END_REASONS,
    END_STOPPED,
    END_STORE_ERROR,
    END_TARGET,
    FAILED,
    LIFE_STATUSES,
    REMOVED,
    ROLLUP_METRICS,
)
from ._store import Store
from ._summary import RESOLUTION, SERIES, SUMMARY_WINDOW, SeriesSummary
from ._write import LEASE_SECONDS, STORED_ACTUATION_DTYPE, FlushStats, RunWriter

__all__ = [
    "Store",
    "RunWriter",
    "FlushStats",
    "BenchInfo",
    "RunInfo",
    "RunUnitInfo",
    "UnitInfo",
    "PartInfo",
    "LotInfo",
    "RollupPoint",
    "IncidentInfo",
    "Trend",
    "LifeTable",
    "SchemaStatus",
    "STORED_ACTUATION_DTYPE",
    "LIFE_DTYPE",
    "KIND_NAMES",
    "ROLLUP_METRICS",
    "RESOLUTION",
    "SERIES",
    "SUMMARY_WINDOW",
    "SeriesSummary",
    "LIFE_STATUSES",
    "ALIVE",
    "FAILED",
    "REMOVED",
    "END_REASONS",
    "END_TARGET",
    "END_ALL_FAILED",
    "END_STOPPED",
    "END_PORT_LOST",
    "END_STORE_ERROR",
    "END_ERROR",
    "END_IDLE",
    "LEASE_SECONDS",
    "ENV_VAR",
    "DEFAULT_FILE",
    "SQLITE_PRAGMAS",
    "resolve_url",
    "make_engine",
    "head_revision",
    "migrations_dir",
]
