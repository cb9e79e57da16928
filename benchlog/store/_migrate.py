"""Alembic migrations: find db/ (a checkout) or benchlog/_db (the installed wheel), upgrade, status."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine
from sqlalchemy.exc import SQLAlchemyError

from benchlog.errors import StoreError, StoreUnreachable


def migrations_dir() -> Path:
    """benchlog/_db when installed from a wheel, else <repo>/db in an editable checkout."""
    package = Path(__file__).resolve().parent.parent
    for candidate in (package / "_db", package.parent / "db"):
        if (candidate / "env.py").is_file():
            return candidate
    raise StoreError(
        f"the migration scripts are missing (looked in {package / '_db'} and {package.parent / 'db'})"
    )


def _config(engine: Engine | None = None) -> Config:
    cfg = Config()
    cfg.set_main_option("script_location", str(migrations_dir()))
    cfg.attributes["engine"] = engine
    return cfg


def head_revision() -> str:
    return ScriptDirectory.from_config(_config()).get_current_head()


def current_revision(engine: Engine) -> str | None:
    try:
        conn = engine.connect()
    except SQLAlchemyError as exc:
        # no connection at all (a server restarting, a network cut): an outage, not a wrong database
        raise StoreUnreachable(f"cannot connect: {exc.orig if exc.orig else exc}") from exc
    try:
        with conn:
            return MigrationContext.configure(conn).get_current_revision()
    except SQLAlchemyError as exc:
        raise StoreError(f"cannot read the schema revision: {exc.orig if exc.orig else exc}") from exc


def upgrade(engine: Engine, revision: str = "head") -> tuple[str | None, str]:
    """Apply migrations up to `revision`; returns (revision before, revision after)."""
    before = current_revision(engine)
    try:
        command.upgrade(_config(engine), revision)
    except SQLAlchemyError as exc:
        raise StoreError(f"migration failed: {' '.join(str(exc.orig or exc).split())}") from exc
    return before, current_revision(engine) or ""


@dataclass(frozen=True, slots=True)
class SchemaStatus:
    current: str | None
    head: str
    pending: tuple[str, ...]  # revisions not yet applied, oldest first

    @property
    def up_to_date(self) -> bool:
        return self.current == self.head


def status(engine: Engine) -> SchemaStatus:
    script = ScriptDirectory.from_config(_config())
    current = current_revision(engine)
    head = script.get_current_head()
    pending = []
    for rev in script.walk_revisions(base="base", head="heads"):
        if current is not None and rev.revision == current:
            break
        pending.append(rev.revision)
    return SchemaStatus(current, head, tuple(reversed(pending)))
