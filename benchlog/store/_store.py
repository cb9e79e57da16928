"""`Store`: open a database, register parts / lots / units / benches, start or resume runs, read."""

from __future__ import annotations

import contextlib
import fcntl
import json
import os
import socket
import time
import uuid
from collections.abc import Iterator
from datetime import UTC, datetime

from sqlalchemy import Engine, insert, select, update
from sqlalchemy.exc import IntegrityError, SQLAlchemyError

from benchlog import __version__
from benchlog.errors import StoreBusyError, StoreError

from . import _schema as s
from ._engine import _one_line, is_empty, make_engine, resolve_url
from ._migrate import status as schema_status
from ._migrate import upgrade as schema_upgrade
from ._read import ReadAPI
from ._stream_read import StreamReadAPI
from ._summary_read import SummaryReadAPI
from ._write import LEASE_SECONDS, RunWriter, _store_error


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def lock_path(db_path: str) -> str:
    """The file beside a SQLite database that serialises opening it: `<database>.lock`."""
    return db_path + ".lock"


@contextlib.contextmanager
def _opening_lock(engine: Engine, readonly: bool) -> Iterator[None]:
    """Serialise the schema check and migration of one SQLite file between processes.

    Several recorders started at once on a new file must not interleave "is it empty?", "which
    revision?" and the migration itself. They take an flock on `<database>.lock`, a file of its own:
    never on the database file, because on POSIX closing any descriptor of a file drops every lock
    the process holds on it, SQLite's included, and the next process to close a connection would then
    delete this process's live write-ahead log. PostgreSQL serialises in the migration instead (an
    advisory lock in db/env.py).
    """
    path = engine.url.database
    if (
        readonly
        or engine.dialect.name != "sqlite"
        or not path
        or path == ":memory:"
        or path.startswith("file:")
    ):
        yield
        return
    lock = lock_path(path)
    try:
        fd = os.open(lock, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o666)
    except OSError as exc:
        raise StoreError(f"cannot open the database's lock file {lock}: {exc.strerror or exc}") from exc
    try:
        fcntl.flock(fd, fcntl.LOCK_EX)
        yield
    finally:
        os.close(fd)  # closing releases the flock


class Store(ReadAPI, SummaryReadAPI, StreamReadAPI):
    """One benchlog database. `Store.open(db)` for recording, `Store.open(db, readonly=True)` for the
    dashboard, reports and statistics (never takes a write lock)."""

    def __init__(self, engine: Engine, url: str, readonly: bool) -> None:
        self.engine = engine
        self.url = url
        self.readonly = readonly

    @property
    def readonly_note(self) -> str | None:
        """One line for a reader to show when the database could not be opened the usual way: a
        file this process may not write, or one read as a snapshot. None otherwise."""
        from ._engine import READ_ONLY_HERE, SNAPSHOT

        how = getattr(self.engine, "benchlog_access", None)
        shown = self._show(self.url)
        if how == SNAPSHOT:
            return (
                f"{shown} is in a folder this user may not write: reading it as a snapshot, "
                "as it was when opened"
            )
        if how == READ_ONLY_HERE:
            return f"{shown} may not be written by this user: reading it read-only"
        return None

    # -- opening ------------------------------------------------------------------------------------
    @classmethod
    def open(
        cls, db: str | None = None, *, readonly: bool = False, upgrade: bool = True, inert_names: bool = False
    ) -> Store:
        """Open the store at `db` (URL or SQLite path; default `$BENCHLOG_DB` or ./benchlog.sqlite).

        Writable: an empty database gets the schema; an older one is upgraded when `upgrade` (never
        recreated), else refused. Read-only: the schema must be at the current revision.
        `inert_names`: names read back are for showing (control characters written out).
        """
        url = resolve_url(db)
        engine = make_engine(url, readonly=readonly)
        try:
            with _opening_lock(engine, readonly):
                cls._check_schema(engine, url, readonly, upgrade)
        except StoreError:
            engine.dispose()
            raise
        except SQLAlchemyError as exc:
            engine.dispose()
            raise _store_error(f"open the database {cls._show(url)}", exc) from exc
        store = cls(engine, url, readonly)
        store.inert_names = inert_names
        return store

    @classmethod
    def _check_schema(cls, engine: Engine, url: str, readonly: bool, upgrade: bool) -> None:
        st = schema_status(engine)
        if not st.up_to_date:
            if readonly:
                what = "has no benchlog schema" if st.current is None else f"is at revision {st.current}"
                raise StoreError(f"the database {cls._show(url)} {what}; run `benchlog db upgrade`")
            if st.current is None and not is_empty(engine):
                st = cls._await_other_creator(engine, st)
                if st.up_to_date:
                    return
                if st.current is None:
                    raise StoreError(
                        f"the database {cls._show(url)} holds other tables and no benchlog schema"
                    )
            if st.current is not None and not upgrade:
                raise StoreError(
                    f"the database {cls._show(url)} is at revision {st.current}; run `benchlog db upgrade`"
                )
            schema_upgrade(engine)

    @staticmethod
    def _await_other_creator(engine: Engine, st, wait_s: float = 30.0):
        """Tables but no revision: on PostgreSQL another recorder may be creating the schema right now
        (its tables became visible between our two reads). When the tables are benchlog's own, wait
        for its revision to appear; a database of other tables is refused at once."""

        from sqlalchemy import inspect

        if engine.dialect.name == "sqlite" or "actuations" not in inspect(engine).get_table_names():
            return st
        end = time.monotonic() + wait_s
        while st.current is None and time.monotonic() < end:
            time.sleep(0.2)
            st = schema_status(engine)
        return st

    @staticmethod
    def _show(url: str) -> str:
        from sqlalchemy.engine import make_url

        u = make_url(url)
        return u.database if u.get_backend_name() == "sqlite" else u.render_as_string(hide_password=True)

    def close(self) -> None:
        self.engine.dispose()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    @staticmethod
    def now() -> datetime:
        return datetime.now(UTC)

    # -- registering --------------------------------------------------------------------------------
    def _get_or_create(self, model, match: dict, values: dict, update_values: dict | None = None) -> int:
        cond = [getattr(model, k) == v for k, v in match.items()]
        for _attempt in range(2):
            try:
                with self.engine.begin() as c:
                    found = c.execute(select(model.id).where(*cond)).scalar()
                    if found is not None:
                        if update_values:
                            c.execute(update(model).where(model.id == found).values(**update_values))
                        return int(found)
                    return int(
                        c.execute(insert(model).values(**match, **values).returning(model.id)).scalar()
                    )
            except IntegrityError:
                continue  # another process created it meanwhile: read it back
            except SQLAlchemyError as exc:
                raise _store_error(f"register {model.__tablename__}", exc) from exc
        raise StoreError(f"cannot register {model.__tablename__} {match}")

    def register_part(
        self, part_number: str, supplier: str = "", *, spec_toml: str | None = None, spec: dict | None = None
    ) -> int:
        """Get or create a part; a spec given is stored (TOML text as loaded and its parsed form)."""
        upd = {}
        if spec_toml is not None:
            upd["spec_toml"] = spec_toml
        if spec is not None:
            upd["spec_json"] = json.loads(json.dumps(spec, default=str))
        if supplier:
            upd["supplier"] = supplier
        return self._get_or_create(
            s.Part,
            {"part_number": part_number},
            {
                "supplier": supplier,
                "spec_toml": spec_toml,
                "spec_json": upd.get("spec_json"),
                "created_at": self.now(),
            },
            upd,
        )

    def register_lot(self, part_id: int, code: str) -> int:
        return self._get_or_create(s.Lot, {"part_id": part_id, "code": code}, {"created_at": self.now()})

    def register_unit(self, lot_id: int, serial: str, notes: str | None = None) -> int:
        upd = {"notes": notes} if notes is not None else None
        unit = self._get_or_create(
            s.Unit,
            {"lot_id": lot_id, "serial": serial},
            {"notes": notes or "", "created_at": self.now()},
            upd,
        )
        with self.engine.begin() as c:
            if c.execute(select(s.UnitLife.unit_id).where(s.UnitLife.unit_id == unit)).first() is None:
                c.execute(
                    insert(s.UnitLife).values(unit_id=unit, status=s.ALIVE, cycles=0, updated_at=self.now())
                )
        return unit

    def register_bench(
        self,
        name: str,
        *,
        board_id: str | None = None,
        clock_hz: int | None = None,
        counter_bits: int | None = None,
        channels: int | None = None,
    ) -> int:
        info = {
            k: v
            for k, v in {
                "board_id": board_id,
                "clock_hz": clock_hz,
                "counter_bits": counter_bits,
                "channels": channels,
            }.items()
            if v is not None
        }
        return self._get_or_create(s.Bench, {"name": name}, {**info, "created_at": self.now()}, info or None)

    def update_bench(self, bench_id: int, **info) -> None:
        with self.engine.begin() as c:
            c.execute(update(s.Bench).where(s.Bench.id == bench_id).values(**info))

    # -- one recorder per bench -----------------------------------------------------------------------
    def acquire_bench(self, bench_id: int) -> str:
        """Take the bench's lease (a token), or raise StoreBusyError naming who holds it.

        A lease is free when never taken, released, expired (no heartbeat for LEASE_SECONDS) or held
        by a process of this host that no longer exists (a recorder killed outright)."""
        token = uuid.uuid4().hex
        host = socket.gethostname()
        now = time.time()
        try:
            with self.engine.begin() as c:
                row = c.execute(select(s.Bench).where(s.Bench.id == bench_id)).mappings().one()
                busy = self._lease_busy(c, row, now)
                if busy:
                    raise StoreBusyError(busy)
                # compare-and-set: only one of two racing recorders can win
                won = c.execute(
                    update(s.Bench)
                    .where(
                        s.Bench.id == bench_id,
                        s.Bench.lease_token.is_(row["lease_token"])
                        if row["lease_token"] is None
                        else s.Bench.lease_token == row["lease_token"],
                    )
                    .values(
                        lease_token=token,
                        lease_host=host,
                        lease_pid=os.getpid(),
                        lease_until=now + LEASE_SECONDS,
                    )
                ).rowcount
                if won != 1:
                    raise StoreBusyError(f"bench {row['name']!r} was just taken by another recorder")
        except SQLAlchemyError as exc:
            raise _store_error("take the bench", exc) from exc
        return token

    @staticmethod
    def _lease_busy(c, row, now: float) -> str | None:
        """Why the bench of `row` cannot be taken now (a live recorder holds it), or None."""
        host = socket.gethostname()
        stale = (
            row["lease_token"] is None
            or (row["lease_until"] or 0) < now
            or (row["lease_host"] == host and row["lease_pid"] and not _pid_alive(row["lease_pid"]))
        )
        if stale:
            return None
        live = c.execute(
            select(s.Run.id)
            .where(s.Run.bench_id == row["id"], s.Run.ended_at.is_(None))
            .order_by(s.Run.id.desc())
        ).scalar()
        age = max(0.0, now - ((row["lease_until"] or now) - LEASE_SECONDS))
        return (
            f"bench {row['name']!r} is being recorded by process {row['lease_pid']} on {row['lease_host']}"
            + (f" (run {live})" if live else "")
            + f", last heartbeat {age:.0f} s ago; stop that recorder first"
        )

    def check_bench_free(self, *, name: str | None = None, bench_id: int | None = None) -> None:
        """Raise StoreBusyError when a live recorder holds the bench; reads only (the lease is taken
        later, once the port has opened, so a failed start writes nothing)."""
        cond = s.Bench.name == name if bench_id is None else s.Bench.id == bench_id
        try:
            with self.engine.connect() as c:
                row = c.execute(select(s.Bench).where(cond)).mappings().first()
                busy = None if row is None else self._lease_busy(c, row, time.time())
        except SQLAlchemyError as exc:
            raise _store_error("read the bench", exc) from exc
        if busy:
            raise StoreBusyError(busy)

    def release_bench(self, bench_id: int, token: str) -> None:
        with self.engine.begin() as c:
            c.execute(
                update(s.Bench)
                .where(s.Bench.id == bench_id, s.Bench.lease_token == token)
                .values(lease_token=None, lease_host=None, lease_pid=None, lease_until=None)
            )

    # -- runs -----------------------------------------------------------------------------------------
    def start_run(
        self,
        bench_id: int,
        units: dict[int, int],
        *,
        profile: dict,
        target_cycles: int = 0,
        rollup_window: int = 100,
        fail_after: int = 5,
        protocol_version: int | None = None,
        board_id: str | None = None,
        clock_hz: int | None = None,
        note: str = "",
        lease_token: str | None = None,
    ) -> RunWriter:
        """Start a run on `bench_id` with `units` {channel: unit_id}; returns its writer.

        Takes the bench lease unless `lease_token` (already taken) is given."""
        if not units:
            raise StoreError("a run needs at least one unit")
        token = lease_token or self.acquire_bench(bench_id)
        try:
            with self.engine.begin() as c:
                run_id = int(
                    c.execute(
                        insert(s.Run)
                        .values(
                            bench_id=bench_id,
                            started_at=self.now(),
                            heartbeat_at=self.now(),
                            profile=profile,
                            target_cycles=target_cycles,
                            cycles_done=0,
                            rate_cps=0.0,
                            software_version=__version__,
                            protocol_version=protocol_version,
                            board_id=board_id,
                            clock_hz=clock_hz,
                            rollup_window=rollup_window,
                            fail_after=fail_after,
                            t_offset_ns=0,
                            segments=1,
                            end_detail="",
                            note=note,
                        )
                        .returning(s.Run.id)
                    ).scalar()
                )
                # a unit is on one bench at a time: its life count is one sequence of cycles
                busy = self._units_busy(c, list(units.values()), except_run=run_id)
                if busy:
                    raise StoreBusyError(busy)
                lives = dict(
                    c.execute(
                        select(s.UnitLife.unit_id, s.UnitLife.cycles).where(
                            s.UnitLife.unit_id.in_(list(units.values()))
                        )
                    ).all()
                )
                c.execute(
                    insert(s.RunUnit),
                    [
                        {
                            "run_id": run_id,
                            "channel": ch,
                            "unit_id": u,
                            "cycle_base": int(lives.get(u, 0)),
                            "cycles_done": 0,
                        }
                        for ch, u in sorted(units.items())
                    ],
                )
        except StoreBusyError:
            self.release_bench(bench_id, token)
            raise
        except SQLAlchemyError as exc:
            self.release_bench(bench_id, token)
            raise _store_error("start the run", exc) from exc
        return RunWriter(self, run_id, token)

    def _units_busy(self, c, unit_ids: list[int], except_run: int) -> str | None:
        """Why these units cannot go into a new run now: one of them is in another run that a live
        recorder writes (its bench's lease is current), or None. The units' rows are locked first (FOR
        UPDATE on PostgreSQL; SQLite's write lock, taken by the caller's insert, serialises anyway), so
        two recorders starting on the same units at once cannot both pass."""
        c.execute(select(s.Unit.id).where(s.Unit.id.in_(unit_ids)).with_for_update()).all()
        rows = c.execute(
            select(s.RunUnit.run_id, s.Unit.serial, s.Run.bench_id)
            .join(s.Run, s.Run.id == s.RunUnit.run_id)
            .join(s.Unit, s.Unit.id == s.RunUnit.unit_id)
            .where(s.RunUnit.unit_id.in_(unit_ids), s.Run.ended_at.is_(None), s.Run.id != except_run)
            .order_by(s.RunUnit.run_id, s.RunUnit.channel)
        ).all()
        now = time.time()
        for run_id, serial, bench_id in rows:
            bench = c.execute(select(s.Bench).where(s.Bench.id == bench_id)).mappings().one()
            why = self._lease_busy(c, bench, now)
            if why:
                return f"unit {serial!r} is in run {run_id}, still being recorded: {why}"
        return None

    def resume_run(self, run_id: int) -> RunWriter:
        """Reopen an interrupted run for a new segment on the same units, keeping its cycle counts."""
        with self.engine.connect() as c:
            run = c.execute(select(s.Run).where(s.Run.id == run_id)).mappings().first()
        if run is None:
            raise StoreError(f"no run {run_id} in this database")
        if run["end_reason"] in (s.END_TARGET, s.END_ALL_FAILED):
            raise StoreError(f"run {run_id} is complete (ended: {run['end_reason']}); start a new run")
        try:
            with self.engine.connect() as c:
                t_hi = max(
                    c.execute(
                        select(s.Actuation.t_start_ns)
                        .where(s.Actuation.run_id == run_id)
                        .order_by(s.Actuation.id.desc())
                        .limit(1)
                    ).scalar()
                    or 0,
                    c.execute(
                        select(s.EdgeChunk.t_hi_ns)
                        .where(s.EdgeChunk.run_id == run_id)
                        .order_by(s.EdgeChunk.id.desc())
                        .limit(1)
                    ).scalar()
                    or 0,
                )
                later = c.execute(
                    select(s.RunUnit.run_id, s.Unit.serial)
                    .join(s.Unit, s.Unit.id == s.RunUnit.unit_id)
                    .where(
                        s.RunUnit.run_id > run_id,
                        s.RunUnit.unit_id.in_(
                            select(s.RunUnit.unit_id).where(s.RunUnit.run_id == run_id).scalar_subquery()
                        ),
                    )
                    .order_by(s.RunUnit.run_id)
                    .limit(1)
                ).first()
        except SQLAlchemyError as exc:
            raise _store_error("resume the run", exc) from exc
        if later is not None:
            # its life went on in that run: cycles resumed here would be counted twice
            raise StoreError(
                f"run {run_id} cannot be resumed: unit {later[1]!r} has been in run {later[0]} since,"
                " which counted its cycles on from this run's; start a new run"
            )
        token = self.acquire_bench(run["bench_id"])
        try:
            with self.engine.begin() as c:
                # the next segment starts a second after the last data (sampler times restart at 0)
                c.execute(
                    update(s.Run)
                    .where(s.Run.id == run_id)
                    .values(
                        ended_at=None,
                        end_reason=None,
                        end_detail="",
                        heartbeat_at=self.now(),
                        t_offset_ns=int(t_hi) + 1_000_000_000,
                        segments=s.Run.segments + 1,
                    )
                )
        except SQLAlchemyError as exc:
            self.release_bench(run["bench_id"], token)
            raise _store_error("resume the run", exc) from exc
        return RunWriter(self, run_id, token)

    def set_unit_status(
        self,
        unit_id: int,
        status: str,
        *,
        failed_at_cycle: int | None = None,
        failure_mode: str | None = None,
        detail: str = "",
    ) -> None:
        """Set a unit's life status by hand (e.g. removed from test: a suspension)."""
        if status not in s.LIFE_STATUSES:
            raise StoreError(f"unknown life status {status!r}: one of {', '.join(s.LIFE_STATUSES)}")
        values = {"status": status, "detail": detail, "updated_at": self.now()}
        if status == s.FAILED:
            if failed_at_cycle is None:
                raise StoreError("a failed unit needs the cycle it failed at")
            values.update(failed_at_cycle=failed_at_cycle, failure_mode=failure_mode, cycles=failed_at_cycle)
        with self.engine.begin() as c:
            c.execute(update(s.UnitLife).where(s.UnitLife.unit_id == unit_id).values(**values))

    def _one_line(self, exc: BaseException) -> str:
        return _one_line(exc)
