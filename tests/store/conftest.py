"""Store fixtures: every store test runs on a SQLite file and on PostgreSQL (own schema per test)."""

from __future__ import annotations

import gc
import uuid
from contextlib import contextmanager

import pytest
from sqlalchemy import create_engine, text

from tests.conftest import need_postgres_url


def _pg_schema_url(base: str) -> tuple[str, str]:
    schema = "t_" + uuid.uuid4().hex[:12]
    sep = "&" if "?" in base else "?"
    return schema, f"{base}{sep}options=-csearch_path%3D{schema}"


@contextmanager
def _pg_schema():
    """A fresh schema on the PostgreSQL test server, dropped afterwards; yields its URL."""
    base = need_postgres_url()
    schema, url = _pg_schema_url(base)
    admin = create_engine(base)
    with admin.begin() as c:
        c.execute(text(f'CREATE SCHEMA "{schema}"'))
    try:
        yield url
    finally:
        gc.collect()  # a connection the test left open warns here, in its own test
        with admin.begin() as c:
            c.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
        admin.dispose()


@pytest.fixture(params=["sqlite", "postgresql"])
def db_url(request, tmp_path):
    """An empty database: a SQLite file, or a fresh schema on the PostgreSQL test server."""
    if request.param == "sqlite":
        yield f"sqlite:///{tmp_path / 'store.sqlite'}"
        return
    with _pg_schema() as url:
        yield url


@pytest.fixture
def pg_url():
    with _pg_schema() as url:
        yield url


@pytest.fixture
def sqlite_url(tmp_path):
    return f"sqlite:///{tmp_path / 'store.sqlite'}"


@pytest.fixture
def open_store(db_url):
    """`open_store(readonly=False)` -> Store on `db_url`; every store is closed after the test."""
    from benchlog.store import Store

    opened = []

    def _open(url: str | None = None, **kw):
        store = Store.open(url or db_url, **kw)
        opened.append(store)
        return store

    yield _open
    for store in opened:
        store.close()


@pytest.fixture
def store(open_store):
    return open_store()
