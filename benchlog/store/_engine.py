"""Opening a store: URL resolution, engines with their pragmas, read-only mode, migrations.

SQLite is the default (one file, WAL, so a dashboard reads while a recorder writes); PostgreSQL is
reached by URL (`postgresql+psycopg://...`). The location is, in order: the `--db` option (an URL or a
file path), the environment variable `BENCHLOG_DB`, then `./benchlog.sqlite`.
"""

from __future__ import annotations

import os
from pathlib import Path

from sqlalchemy import Engine, create_engine, event, inspect
from sqlalchemy.engine import make_url
from sqlalchemy.exc import ArgumentError, SQLAlchemyError
from sqlalchemy.pool import NullPool

from benchlog.errors import StoreError

ENV_VAR = "BENCHLOG_DB"
DEFAULT_FILE = "benchlog.sqlite"
BUSY_TIMEOUT_MS = 10_000

# Pragmas every writing SQLite connection gets, once, in the connect event (read back in the tests).
SQLITE_PRAGMAS = (
    ("journal_mode", "WAL"),
    ("synchronous", "NORMAL"),
    ("foreign_keys", "ON"),
    ("busy_timeout", str(BUSY_TIMEOUT_MS)),
)


def resolve_url(db: str | None = None) -> str:
    """The database URL for `--db` (an URL or a path), else `$BENCHLOG_DB`, else ./benchlog.sqlite."""
    target = db or os.environ.get(ENV_VAR) or DEFAULT_FILE
    if "://" in target:
        return target
    return "sqlite:///" + str(Path(target).expanduser().resolve())


def _sqlite_path(url) -> str | None:
    database = url.database
    if not database or database == ":memory:":
        return None
    if database.startswith("file:"):
        return database[5:].split("?", 1)[0]
    return database


def make_engine(url: str, *, readonly: bool = False) -> Engine:
    """An engine for `url` with benchlog's connection settings. Raises StoreError on a bad URL."""
    try:
        parsed = make_url(url)
    except ArgumentError as exc:
        raise StoreError(f"not a database URL or path: {url!r}") from exc
    backend = parsed.get_backend_name()
    if backend == "sqlite":
        return _sqlite_engine(parsed, readonly)
    if backend == "postgresql":
        if parsed.drivername == "postgresql":
            parsed = parsed.set(drivername="postgresql+psycopg")
        connect_args = {}
        if readonly:
            # keep options given in the URL (e.g. a search_path) and add read-only transactions
            given = parsed.query.get("options", "")
            given = given if isinstance(given, str) else " ".join(given)
            connect_args["options"] = (given + " -c default_transaction_read_only=on").strip()
            parsed = parsed.difference_update_query(["options"])
        try:
            engine = create_engine(parsed, connect_args=connect_args, pool_pre_ping=True)
        except (ImportError, SQLAlchemyError) as exc:
            raise StoreError(f"cannot use {parsed.render_as_string()}: {exc}") from exc
        _report_damage(engine)
        return engine
    raise StoreError(f"unsupported database {backend!r}: use a SQLite file or a postgresql:// URL")


# How a reader opens a SQLite file (`readonly_access`): plainly read-only; read-only in a place this
# process may not write (it still follows a live writer's log); or as an unchanging snapshot.
READ_ONLY = "read-only"
READ_ONLY_HERE = "read-only here"
SNAPSHOT = "snapshot"


def readonly_access(path: str) -> str:
    """How to open `path` for reading. SQLite needs to make the `-shm` file beside a WAL database to
    read it; where the folder may not be written and no writer left a `-wal` there (so none can be
    writing), the file is opened `immutable` instead: as a snapshot. With a `-wal` present, read-only
    reading follows it (immutable would ignore it and miss committed data)."""
    folder = os.path.dirname(os.path.abspath(path))
    if os.path.exists(path + "-wal"):
        return READ_ONLY if os.access(path, os.W_OK) else READ_ONLY_HERE
    if not os.access(folder, os.W_OK):
        return SNAPSHOT
    return READ_ONLY if os.access(path, os.W_OK) else READ_ONLY_HERE


def _sqlite_engine(parsed, readonly: bool) -> Engine:
    path = _sqlite_path(parsed)
    if path is not None and not readonly:
        parent = Path(path).parent
        if not parent.is_dir():
            raise StoreError(f"cannot create the database {path}: folder {parent} does not exist")
    how = None
    if readonly:
        if path is None or not Path(path).exists():
            raise StoreError(f"no database at {path}")
        # A read-only URI connection never takes a write lock; query_only guards it once more.
        how = readonly_access(path)
        flags = "mode=ro&immutable=1" if how == SNAPSHOT else "mode=ro"
        parsed = parsed.set(database=f"file:{Path(path).as_posix()}?{flags}", query={"uri": "true"})
    engine = create_engine(parsed, poolclass=NullPool if readonly else None)
    engine.benchlog_access = how  # type: ignore[attr-defined]  # see readonly_access

    @event.listens_for(engine, "connect")
    def _set_pragmas(dbapi_connection, _record) -> None:
        cursor = dbapi_connection.cursor()
        try:
            if readonly:
                cursor.execute(f"PRAGMA busy_timeout={BUSY_TIMEOUT_MS}")
                cursor.execute("PRAGMA query_only=ON")
                cursor.execute("PRAGMA foreign_keys=ON")
            else:
                for name, value in SQLITE_PRAGMAS:
                    cursor.execute(f"PRAGMA {name}={value}")
        finally:
            cursor.close()

    _report_damage(engine)
    return engine


# What SQLite (and PostgreSQL) say when the file or a page of it is damaged.
_DAMAGE_MARKS = ("malformed", "not a database", "disk image", "data_corrupted", "index corrupted", "corrupt")


def damaged(exc: BaseException, where: str = "") -> StoreError | None:
    """A StoreError naming `benchlog db check` when `exc` says the database is damaged, else None."""
    text = _one_line(exc)
    if not any(mark in text.lower() for mark in _DAMAGE_MARKS):
        return None
    at = f" {where}" if where else ""
    opt = f" --db {where}" if where else ""
    return StoreError(
        f"the database{at} is damaged ({text}); run `benchlog db check{opt}` to see what is wrong"
    )


def _shown(url) -> str:
    if url.get_backend_name() == "sqlite":
        path = _sqlite_path(url) or ""
        return path.split("?", 1)[0]
    return url.render_as_string(hide_password=True)


def _report_damage(engine: Engine) -> None:
    """Every statement run through the engine that finds the database damaged raises one clear
    StoreError (SQLAlchemy's handle_error event lets a listener raise its own exception instead)."""
    where = _shown(engine.url)

    @event.listens_for(engine, "handle_error")
    def _on_error(context) -> None:
        err = damaged(context.original_exception, where)
        if err is not None:
            raise err from context.original_exception


def is_empty(engine: Engine) -> bool:
    try:
        return not inspect(engine).get_table_names()
    except SQLAlchemyError as exc:
        raise StoreError(f"cannot open the database: {_one_line(exc)}") from exc


def _one_line(exc: BaseException) -> str:
    orig = getattr(exc, "orig", None)
    return " ".join(str(orig if orig is not None else exc).split())
